import { createCookieSessionStorage, redirect, type Session } from "react-router";
import type { Env } from "~/env.server";

export interface SessionData {
  userId: number;
  returnTo: string;
}

const storages = new WeakMap<Env, ReturnType<typeof makeStorage>>();

function makeStorage(env: Env) {
  return createCookieSessionStorage<SessionData>({
    cookie: {
      name: "__weir_session",
      httpOnly: true,
      // Lax keeps cross-site POSTs from carrying the session (CSRF), while links into the console still work.
      sameSite: "lax",
      path: "/",
      // Demo mode serves a production build over plain http on this machine: no Secure flag there.
      secure: env.NODE_ENV === "production" && !env.WEIR_DEMO,
      secrets: [env.SESSION_SECRET],
      maxAge: 7 * 24 * 3600,
    },
  });
}

/** The cookie session storage of this environment (one per process). */
export function sessionStorage(env: Env) {
  let storage = storages.get(env);
  if (!storage) storages.set(env, (storage = makeStorage(env)));
  return storage;
}

export function getSession(env: Env, request: Request): Promise<Session<SessionData>> {
  return sessionStorage(env).getSession(request.headers.get("cookie"));
}

/** Ends the session and sends the browser to the landing page. */
export async function signOut(env: Env, request: Request): Promise<Response> {
  const session = await getSession(env, request);
  return redirect("/", { headers: { "Set-Cookie": await sessionStorage(env).destroySession(session) } });
}

/** Only same-site paths are allowed as a place to return to after sign-in (no open redirects). */
export function safeReturnTo(value: unknown, fallback = "/console"): string {
  return typeof value === "string" && value.startsWith("/") && !value.startsWith("//") && !value.startsWith("/\\") ? value : fallback;
}
