import { redirect } from "react-router";
import { signOut } from "~/auth/session.server";
import type { Route } from "./+types/signout";

/** POST /signout ends the session (a POST, so a link elsewhere cannot sign anyone out). */
export async function action({ request, context }: Route.ActionArgs) {
  return signOut(context.env, request);
}

export function loader() {
  return redirect("/");
}
