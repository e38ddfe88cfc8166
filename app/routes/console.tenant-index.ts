import { redirect } from "react-router";
import { requireMember } from "~/auth/guards.server";
import type { Route } from "./+types/console.tenant-index";

/** /t/:tenant → its Slice page. */
export async function loader({ request, context, params }: Route.LoaderArgs) {
  await requireMember(request, context, params.tenant);
  throw redirect(`/t/${params.tenant}/slice`);
}
