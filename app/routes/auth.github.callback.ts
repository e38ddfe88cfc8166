import { redirect } from "react-router";
import { recordAudit } from "~/audit.server";
import { githubAuthenticator, SignInError } from "~/auth/github.server";
import { getSession, safeReturnTo, sessionStorage } from "~/auth/session.server";
import { upsertUserFromGitHub } from "~/auth/users.server";
import type { Route } from "./+types/auth.github.callback";
import { callbackUrl } from "./auth.github";

/** GET /auth/github/callback: GitHub sends the browser back here with a code. */
export async function loader({ request, context }: Route.LoaderArgs) {
  const session = await getSession(context.env, request);
  const authenticator = githubAuthenticator(context.github, callbackUrl(request, context.env.PUBLIC_URL));
  let identity;
  try {
    identity = await authenticator.authenticate("github", request);
  } catch (thrown) {
    if (thrown instanceof Response) return thrown;
    const message = thrown instanceof SignInError ? thrown.message : "GitHub sign-in did not complete. Try again.";
    context.logger.warn({ err: thrown }, "sign-in failed");
    throw redirect(`/signin?${new URLSearchParams({ error: message })}`);
  }
  const user = await upsertUserFromGitHub(context.db, identity);
  await recordAudit(context.db, { tenantId: null, actor: { id: user.id, label: identity.login }, action: "sign-in", target: identity.email });
  const returnTo = safeReturnTo(session.get("returnTo"));
  session.unset("returnTo");
  session.set("userId", user.id);
  return redirect(returnTo, { headers: { "Set-Cookie": await sessionStorage(context.env).commitSession(session) } });
}
