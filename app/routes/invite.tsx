import type { ReactNode } from "react";
import { data, Form, Link, redirect, useActionData, useLoaderData, useNavigation } from "react-router";
import { recordAudit } from "~/audit.server";
import { optionalUser, requireUser } from "~/auth/guards.server";
import { membershipBySlug, roleAtLeast } from "~/auth/users.server";
import { Button } from "~/components/ui";
import type { Role } from "~/db/schema.server";
import { utcMinute } from "~/people/invite-mail";
import { acceptInvite, findInvite, inviteTokenSchema, type InviteState } from "~/people/invites.server";
import { memberLabel, ROLE_ABILITIES, withArticle } from "~/people/roles";
import type { Route } from "./+types/invite";

export { ErrorBoundary } from "~/components/ErrorPanel";

export const meta: Route.MetaFunction = ({ data }) => [
  { title: data && (data.state === "valid" || data.state === "sign-in") ? `Join ${data.tenant.name} · Weir` : "Invitation · Weir" },
  // The token is a secret in the URL: keep it out of Referer headers sent to other sites.
  { name: "referrer", content: "no-referrer" },
];

type Unusable = Exclude<InviteState, "valid"> | "unknown";

type InvitePage =
  | { state: "unknown"; signedInAs: string }
  /** Signed out, a valid invitation: who invites whom to which tenant as what, before signing in. */
  | { state: "sign-in"; email: string; role: Role; tenant: { name: string }; invitedBy: string | null; expiresAt: number; returnTo: string }
  /** Signed out, a link that cannot be used (never was, expired, used, withdrawn): one answer for all, so the link tells nothing. */
  | { state: "unusable" }
  | {
      state: InviteState;
      signedInAs: string;
      email: string;
      role: Role;
      tenant: { slug: string; name: string };
      invitedBy: string | null;
      expiresAt: number;
      acceptedAt: number | null;
      acceptedByMe: boolean;
      revokedAt: number | null;
      currentRole: Role | null;
      /** Accepting leaves the current role as it is (it is already at least the invited one). */
      keepsRole: boolean;
    };

// 404 for a link that never was an invitation; 410 Gone (RFC 9110 §15.5.11) for one that was
// and no longer works, since asking again will not help.
const statusOf = (state: InviteState | "unknown") => (state === "valid" ? 200 : state === "unknown" ? 404 : 410);

export async function loader({ request, context, params }: Route.LoaderArgs) {
  const user = await optionalUser(request, context);
  if (!user) return signedOut(context, params.token);
  const signedInAs = memberLabel(user) === user.email ? user.email : `${memberLabel(user)} (${user.email})`;
  const token = inviteTokenSchema.safeParse(params.token);
  const invite = token.success ? await findInvite(context.db, token.data) : undefined;
  if (!invite) return data<InvitePage>({ state: "unknown", signedInAs }, { status: 404 });
  const membership = await membershipBySlug(context.db, user.id, invite.tenant.slug);
  return data<InvitePage>(
    {
      state: invite.state,
      signedInAs,
      email: invite.email,
      role: invite.role,
      tenant: { slug: invite.tenant.slug, name: invite.tenant.name },
      invitedBy: invite.invitedBy,
      expiresAt: invite.expiresAt,
      acceptedAt: invite.acceptedAt,
      acceptedByMe: invite.acceptedBy === user.id,
      revokedAt: invite.revokedAt,
      currentRole: membership?.role ?? null,
      keepsRole: membership !== undefined && roleAtLeast(membership.role, invite.role),
    },
    { status: statusOf(invite.state) },
  );
}

/**
 * The page for someone not signed in yet. A usable invitation says who invited which e-mail
 * address to which tenant with which role, then offers the sign-in that comes back here. Any
 * other link gets the same 404 whatever the reason, naming no tenant or person, since the
 * holder of a dead link has no claim to learn what it was.
 */
async function signedOut(context: Route.LoaderArgs["context"], rawToken: string) {
  const token = inviteTokenSchema.safeParse(rawToken);
  const invite = token.success ? await findInvite(context.db, token.data) : undefined;
  if (!invite || invite.state !== "valid") return data<InvitePage>({ state: "unusable" }, { status: 404 });
  return data<InvitePage>({
    state: "sign-in",
    email: invite.email,
    role: invite.role,
    tenant: { name: invite.tenant.name },
    invitedBy: invite.invitedBy,
    expiresAt: invite.expiresAt,
    returnTo: `/invite/${token.data}`,
  });
}

export async function action({ request, context, params }: Route.ActionArgs) {
  const user = await requireUser(request, context);
  const token = inviteTokenSchema.safeParse(params.token);
  if (!token.success) return data<{ refused: Unusable }>({ refused: "unknown" }, { status: 404 });
  const result = await acceptInvite(context.db, token.data, user.id);
  if (!result.ok) return data<{ refused: Unusable }>({ refused: result.state }, { status: statusOf(result.state) });
  await recordAudit(context.db, {
    tenantId: result.tenant.id,
    actor: { id: user.id, label: memberLabel(user) },
    action: "invite.accept",
    target: result.email,
    detail: { role: result.role, invitedAs: result.invitedRole, outcome: result.outcome },
  });
  throw redirect(`/t/${result.tenant.slug}/slice`);
}

export default function Invite() {
  const page = useLoaderData<typeof loader>();
  const refused = useActionData<typeof action>()?.refused;
  const navigation = useNavigation();
  const accepting = navigation.state !== "idle" && navigation.formMethod === "POST";

  if (page.state === "sign-in" || page.state === "unusable") {
    return (
      <main className="mx-auto flex min-h-screen max-w-xl flex-col justify-center px-6 py-16">
        <p className="font-mono text-sm tracking-widest text-sand-300">WEIR · INVITATION</p>
        {page.state === "sign-in" ? <SignInFirst page={page} /> : <Unusable />}
      </main>
    );
  }

  return (
    <main className="mx-auto flex min-h-screen max-w-xl flex-col justify-center px-6 py-16">
      <p className="font-mono text-sm tracking-widest text-sand-300">WEIR · INVITATION</p>
      {refused ? <Refused state={refused} /> : page.state === "unknown" ? <Unknown /> : page.state !== "valid" ? <NoLongerValid page={page} /> : <Valid page={page} accepting={accepting} />}
      {/* A div, not a p: the sign-out form may not sit inside a paragraph. */}
      <div className="mt-10 border-t border-river-800 pt-4 text-sm text-river-300">
        Signed in as <span className="font-mono text-river-100">{page.signedInAs}</span>.{" "}
        <Form method="post" action="/signout" className="inline">
          <button type="submit" className="text-sand-300 underline underline-offset-4 hover:text-sand-200">
            Sign out
          </button>
        </Form>
        {page.state === "valid" ? " to accept with another GitHub account." : "."}
      </div>
    </main>
  );
}

type Known = Extract<InvitePage, { state: InviteState }>;

function SignInFirst({ page }: { page: Extract<InvitePage, { state: "sign-in" }> }) {
  return (
    <>
      <h1 className="mt-2 text-3xl font-semibold text-river-50">
        Join {page.tenant.name} as {withArticle(page.role)}
      </h1>
      <p className="mt-4 text-river-200">
        {page.invitedBy ?? "An admin"} invited <span className="font-mono text-river-100">{page.email}</span> to the tenant {page.tenant.name} on Weir.{" "}
        {withArticle(page.role, true)} {ROLE_ABILITIES[page.role]}.
      </p>
      <p className="mt-4 text-river-200">Sign in with your GitHub account first; you come back to this page to accept.</p>
      <Form method="post" action="/auth/github" className="mt-8 flex flex-wrap items-center gap-4">
        <input type="hidden" name="returnTo" value={page.returnTo} />
        <Button type="submit" className="px-5 py-2.5">
          Sign in with GitHub
        </Button>
        <span className="text-sm text-river-300">The link works once and expires {utcMinute(page.expiresAt)}.</span>
      </Form>
    </>
  );
}

function Unusable() {
  return (
    <Notice status={404} title="This invitation link cannot be used">
      <p>
        It may have expired (invitations work for 7 days), been used already, been withdrawn, or been cut short by a mail program. Ask the admin who invited
        you to send a new invitation.
      </p>
    </Notice>
  );
}

function Valid({ page, accepting }: { page: Known; accepting: boolean }) {
  return (
    <>
      <h1 className="mt-2 text-3xl font-semibold text-river-50">
        Join {page.tenant.name} as {withArticle(page.role)}
      </h1>
      <p className="mt-4 text-river-200">
        {page.invitedBy ?? "An admin"} invited <span className="font-mono text-river-100">{page.email}</span> to the tenant {page.tenant.name}.{" "}
        {withArticle(page.role, true)} {ROLE_ABILITIES[page.role]}.
      </p>
      {page.currentRole ? (
        <p className="mt-4 rounded-md border-l-4 border-sand-400 bg-river-900 px-4 py-3 text-sm text-river-100">
          You already belong to {page.tenant.name} as {withArticle(page.currentRole)}.{" "}
          {page.keepsRole ? `Accepting keeps your role (${page.currentRole}) and uses up the invitation.` : `Accepting raises your role to ${page.role}.`}
        </p>
      ) : null}
      <Form method="post" className="mt-8 flex flex-wrap items-center gap-4">
        <Button type="submit" disabled={accepting} className="px-5 py-2.5">
          {accepting ? "Accepting…" : "Accept"}
        </Button>
        <span className="text-sm text-river-300">The link works once and expires {utcMinute(page.expiresAt)}.</span>
      </Form>
    </>
  );
}

function NoLongerValid({ page }: { page: Known }) {
  const ask = page.invitedBy ? `Ask ${page.invitedBy} or another admin of ${page.tenant.name}` : `Ask an admin of ${page.tenant.name}`;
  if (page.state === "accepted") {
    return (
      <Notice status={410} title="This invitation was already used">
        <p>
          It was accepted {page.acceptedAt ? utcMinute(page.acceptedAt) : "earlier"}
          {page.acceptedByMe ? " by you" : " by another account"}; an invitation works only once.
        </p>
        {page.currentRole ? (
          <p>
            You belong to {page.tenant.name} as {withArticle(page.currentRole)}:{" "}
            <Link to={`/t/${page.tenant.slug}/slice`} className="text-sand-300 underline underline-offset-4 hover:text-sand-200">
              open {page.tenant.name}
            </Link>
            .
          </p>
        ) : (
          <p>{ask} for a new invitation.</p>
        )}
      </Notice>
    );
  }
  if (page.state === "revoked") {
    return (
      <Notice status={410} title="This invitation was withdrawn">
        <p>
          An admin of {page.tenant.name} revoked it {page.revokedAt ? utcMinute(page.revokedAt) : "earlier"}, so the link no longer works. {ask} if you still need access.
        </p>
      </Notice>
    );
  }
  return (
    <Notice status={410} title="This invitation has expired">
      <p>
        It expired {utcMinute(page.expiresAt)}; invitations work for 7 days. {ask} to send a new one.
      </p>
    </Notice>
  );
}

function Unknown() {
  return (
    <Notice status={404} title="This invitation link is not valid">
      <p>No invitation has this link. Check that you opened the whole link from the e-mail (mail programs sometimes break long links), or ask the admin who invited you to send a new invitation.</p>
    </Notice>
  );
}

/** What the POST found when the invitation changed between showing the page and pressing Accept. */
function Refused({ state }: { state: Unusable }) {
  const text: Record<Unusable, string> = {
    unknown: "No invitation has this link. Ask the admin who invited you for a new one.",
    accepted: "This invitation was used meanwhile; it works only once. Ask an admin of the tenant for a new one if you still need access.",
    revoked: "This invitation was revoked meanwhile. Ask an admin of the tenant for a new one if you still need access.",
    expired: "This invitation expired meanwhile (invitations work for 7 days). Ask an admin of the tenant for a new one.",
  };
  return (
    <Notice status={statusOf(state)} title="The invitation could not be accepted">
      <p>{text[state]}</p>
    </Notice>
  );
}

function Notice({ status, title, children }: { status: number; title: string; children: ReactNode }) {
  return (
    <div role="alert">
      <p className="mt-2 font-mono text-sm text-river-300">{status}</p>
      <h1 className="mt-1 text-3xl font-semibold text-river-50">{title}</h1>
      <div className="mt-4 space-y-3 text-river-200">{children}</div>
    </div>
  );
}
