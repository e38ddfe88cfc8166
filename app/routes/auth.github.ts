import { redirect } from "react-router";
import { githubAuthenticator } from "~/auth/github.server";
import { getSession, safeReturnTo, sessionStorage } from "~/auth/session.server";
import type { Route } from "./+types/auth.github";

/** The OAuth callback URL: PUBLIC_URL when set (behind a proxy), else this request's origin. */
export function callbackUrl(request: Request, publicUrl: string | undefined): string {
  return new URL("/auth/github/callback", publicUrl ?? new URL(request.url).origin).toString();
}

/** POST /auth/github: remember where to come back to and go to GitHub's authorize page. */
export async function action({ request, context }: Route.ActionArgs) {
  // remix-auth clones the request, so read the form from a clone and leave the body unread.
  const form = await request.clone().formData();
  const session = await getSession(context.env, request);
  session.set("returnTo", safeReturnTo(form.get("returnTo")));
  const authenticator = githubAuthenticator(context.github, callbackUrl(request, context.env.PUBLIC_URL));
  try {
    await authenticator.authenticate("github", request);
  } catch (thrown) {
    // The strategy throws its redirect to GitHub; add our session cookie to it.
    if (thrown instanceof Response) {
      thrown.headers.append("Set-Cookie", await sessionStorage(context.env).commitSession(session));
      return thrown;
    }
    throw thrown;
  }
  return new Response(null, { status: 500 });
}

export function loader() {
  return redirect("/signin");
}
