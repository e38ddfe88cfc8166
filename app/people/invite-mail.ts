import type { Role } from "~/db/schema.server";
import { ROLE_ABILITIES, withArticle } from "./roles";

/** `https://weir.example.net/invite/<token>`: PUBLIC_URL when set (behind a proxy), else the request's origin. */
export function inviteLink(token: string, request: Request, publicUrl: string | undefined): string {
  return new URL(`/invite/${token}`, publicUrl ?? new URL(request.url).origin).toString();
}

/** Minutes are enough for an expiry date; seconds would only be noise in a message. */
export function utcMinute(ms: number): string {
  return `${new Date(ms).toISOString().slice(0, 16).replace("T", " ")} UTC`;
}

/** The invitation e-mail: who invites, to which tenant, as what, the link and when it stops working. */
export function inviteMessage(input: {
  tenantName: string;
  role: Role;
  inviter: { name: string | null; login: string | null; email: string };
  link: string;
  expiresAt: number;
}): { subject: string; text: string } {
  const who = input.inviter.name ?? input.inviter.login ?? input.inviter.email;
  const subject = `${who} invited you to ${input.tenantName} on Weir`;
  const text = [
    "Hello,",
    "",
    `${who} (${input.inviter.email}) invited you to join the tenant "${input.tenantName}" on Weir as ${withArticle(input.role)}.`,
    `${withArticle(input.role, true)} ${ROLE_ABILITIES[input.role]}.`,
    "",
    "To accept, open this link, sign in with GitHub and press Accept:",
    "",
    input.link,
    "",
    `The link works once and expires on ${utcMinute(input.expiresAt)}. Do not forward it: whoever uses it joins the tenant.`,
    "If you did not expect this invitation, ignore this message; nothing happens unless the link is used.",
    "",
    "— Weir",
  ].join("\n");
  return { subject, text };
}
