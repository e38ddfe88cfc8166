import { data, Form, Link, redirect, useActionData, useLoaderData, useNavigation, useSearchParams } from "react-router";
import { z } from "zod";
import { recordAudit } from "~/audit.server";
import { requireMember } from "~/auth/guards.server";
import { emailSchema, roleSchema } from "~/auth/users.server";
import { Button, EmptyState, Field, inputClass, PageHeader, Panel } from "~/components/ui";
import type { Role } from "~/db/schema.server";
import { inviteLink, inviteMessage, utcMinute } from "~/people/invite-mail";
import { createInvite, discardInvite, listPendingInvites, revokeInvite } from "~/people/invites.server";
import { changeRole, listMembers, removeMember, type MemberRefusal } from "~/people/members.server";
import { memberLabel, ROLE_ABILITIES, ROLE_CHOICES, withArticle } from "~/people/roles";
import type { Route } from "./+types/console.people";

export { ErrorBoundary } from "~/components/ErrorPanel";

export const meta: Route.MetaFunction = ({ data }) => [{ title: `People · ${data?.tenant.name ?? "Tenant"} · Weir` }];

export async function loader({ request, context, params }: Route.LoaderArgs) {
  const { user, tenant } = await requireMember(request, context, params.tenant, "admin");
  const [members, invites] = await Promise.all([listMembers(context.db, tenant.id), listPendingInvites(context.db, tenant.id)]);
  return {
    tenant: { slug: tenant.slug, name: tenant.name },
    me: user.id,
    members,
    invites,
    fakeMail: context.mail.caught() !== null,
  };
}

const ID_RULE = "must be an id (a positive whole number)";
const id = z.coerce.number({ error: ID_RULE }).int(ID_RULE).positive(ID_RULE);

/** The four things this page posts, told apart by `intent`. */
const actionSchema = z.discriminatedUnion(
  "intent",
  [
    z.object({ intent: z.literal("role"), userId: id, role: roleSchema }),
    z.object({ intent: z.literal("remove"), userId: id }),
    z.object({ intent: z.literal("invite"), email: z.string().trim().pipe(emailSchema), role: roleSchema }),
    z.object({ intent: z.literal("revoke"), inviteId: id }),
  ],
  { error: "Unknown request: the form's intent must be role, remove, invite or revoke." },
);
const FIELD_NAMES: Record<string, string> = { email: "E-mail", role: "Role", userId: "Member id", inviteId: "Invitation id" };

type Intent = z.infer<typeof actionSchema>["intent"];
type ActionResult =
  | { ok: true; intent: Intent; message: string; mailCaught?: boolean }
  | { ok: false; intent: Intent | null; message: string; fieldErrors?: Partial<Record<"email" | "role", string>> };

function fail(status: number, intent: Intent | null, message: string, fieldErrors?: Partial<Record<"email" | "role", string>>) {
  return data<ActionResult>({ ok: false, intent, message, fieldErrors }, { status });
}

export async function action({ request, context, params }: Route.ActionArgs) {
  const { user, tenant } = await requireMember(request, context, params.tenant, "admin");
  let fields: Record<string, FormDataEntryValue>;
  try {
    fields = Object.fromEntries(await request.formData());
  } catch {
    return fail(415, null, "Send the form as application/x-www-form-urlencoded or multipart/form-data.");
  }
  const parsed = actionSchema.safeParse(fields);
  if (!parsed.success) {
    const intent = typeof fields.intent === "string" && ["role", "remove", "invite", "revoke"].includes(fields.intent) ? (fields.intent as Intent) : null;
    const fieldErrors: Partial<Record<"email" | "role", string>> = {};
    const problems = parsed.error.issues.map((issue) => {
      const key = String(issue.path[0] ?? "");
      const text = FIELD_NAMES[key] ? `${FIELD_NAMES[key]} ${issue.message}` : issue.message;
      if ((key === "email" || key === "role") && !fieldErrors[key]) fieldErrors[key] = text;
      return text;
    });
    return fail(400, intent, `The form was not accepted: ${problems.join("; ")}.`, fieldErrors);
  }
  const input = parsed.data;
  const actor = { id: user.id, label: memberLabel(user) };
  const db = context.db;

  switch (input.intent) {
    case "role": {
      const change = await changeRole(db, tenant.id, input.userId, input.role);
      if (!change.ok) return refused(change.reason, "role", tenant.name);
      if (change.from === change.to) return data<ActionResult>({ ok: true, intent: "role", message: `${change.member.label} is already ${withArticle(change.to)}; nothing changed.` });
      await recordAudit(db, { tenantId: tenant.id, actor, action: "member.role", target: change.member.label, detail: { from: change.from, to: input.role } });
      // Demoting yourself takes this page away; go where the new role still reaches.
      if (input.userId === user.id) throw redirect(`/t/${tenant.slug}/slice`);
      return data<ActionResult>({ ok: true, intent: "role", message: `${change.member.label} is now ${withArticle(input.role)} (was ${withArticle(change.from)}).` });
    }
    case "remove": {
      const change = await removeMember(db, tenant.id, input.userId);
      if (!change.ok) return refused(change.reason, "remove", tenant.name);
      await recordAudit(db, { tenantId: tenant.id, actor, action: "member.remove", target: change.member.label, detail: { role: change.from } });
      if (input.userId === user.id) throw redirect("/console");
      return data<ActionResult>({ ok: true, intent: "remove", message: `${change.member.label} no longer belongs to ${tenant.name}.` });
    }
    case "invite": {
      const made = await createInvite(db, { tenantId: tenant.id, email: input.email, role: input.role, invitedBy: user.id });
      if (!made.ok) {
        return made.reason === "member"
          ? fail(409, "invite", `${input.email} already belongs to ${tenant.name} as ${withArticle(made.role)}; change the role in the members table instead.`, {
              email: "Already a member",
            })
          : fail(409, "invite", `${input.email} already has an invitation waiting (until ${utcMinute(made.expiresAt)}); revoke it below to send a new one.`, {
              email: "Already invited",
            });
      }
      const message = inviteMessage({
        tenantName: tenant.name,
        role: input.role,
        inviter: user,
        link: inviteLink(made.token, request, context.env.PUBLIC_URL),
        expiresAt: made.expiresAt,
      });
      try {
        await context.mail.send({ to: input.email, ...message });
      } catch (error) {
        // An invitation nobody received would only block a second attempt; take it back.
        await discardInvite(db, tenant.id, made.id);
        context.logger.warn({ err: error }, "invitation e-mail not sent");
        return fail(503, "invite", "The invitation e-mail could not be sent (the mail relay did not accept it), so no invitation was made. Try again in a while; if it keeps failing, the operator should check SMTP_URL.");
      }
      await recordAudit(db, { tenantId: tenant.id, actor, action: "member.invite", target: input.email, detail: { role: input.role, expiresAt: made.expiresAt } });
      return data<ActionResult>({
        ok: true,
        intent: "invite",
        message: `Invitation sent to ${input.email} to join as ${withArticle(input.role)}; the link works once, until ${utcMinute(made.expiresAt)}.`,
        mailCaught: context.mail.caught() !== null,
      });
    }
    case "revoke": {
      const revoked = await revokeInvite(db, tenant.id, input.inviteId);
      if (!revoked) return fail(404, "revoke", "There is no pending invitation with that id: it may have been accepted, revoked or expired meanwhile. Reload the page.");
      await recordAudit(db, { tenantId: tenant.id, actor, action: "invite.revoke", target: revoked.email, detail: { role: revoked.role } });
      return data<ActionResult>({ ok: true, intent: "revoke", message: `The invitation of ${revoked.email} is revoked; its link no longer works.` });
    }
  }
}

function refused(reason: MemberRefusal, intent: "role" | "remove", tenantName: string) {
  if (reason === "not-member") return fail(404, intent, `That person is not a member of ${tenantName} (any more). Reload the page to see the current members.`);
  return fail(
    409,
    intent,
    intent === "role"
      ? `This is the only admin of ${tenantName}; make another member an admin first, so someone can still manage the tenant.`
      : `The only admin of ${tenantName} cannot be removed; make another member an admin first, so someone can still manage the tenant.`,
  );
}

const LAST_ADMIN_NOTE = "The only admin: make another member an admin before changing or removing this one.";

export default function People() {
  const { tenant, me, members, invites, fakeMail } = useLoaderData<typeof loader>();
  const result = useActionData<typeof action>();
  const [search] = useSearchParams();
  const base = `/t/${tenant.slug}/people`;
  const admins = members.filter((m) => m.role === "admin").length;
  const removing = members.find((m) => String(m.userId) === search.get("remove"));

  return (
    <>
      <PageHeader title="People" lead={<>Who belongs to {tenant.name}, with which role, and who is invited. Every change here is written to the Ledger.</>} />
      {result && result.intent !== "invite" ? <Outcome result={result} /> : null}

      <div className="grid grid-cols-[minmax(0,1fr)] gap-6">
        <Panel title="Members">
          {removing ? <ConfirmRemoval base={base} tenantName={tenant.name} member={removing} self={removing.userId === me} lastAdmin={removing.role === "admin" && admins <= 1} /> : null}
          {/* The padding keeps the focus rings of edge buttons from being clipped by the scroll box. */}
          <div className="-m-1.5 overflow-x-auto p-1.5">
            <table className="sticky-first w-full text-left text-sm">
              <caption className="sr-only">Members of {tenant.name}, admins first</caption>
              <thead className="border-b border-river-700 text-xs tracking-wide text-river-300 uppercase">
                <tr>
                  <th scope="col" className="py-2 pr-4 font-medium">Login</th>
                  <th scope="col" className="py-2 pr-4 font-medium">E-mail</th>
                  <th scope="col" className="py-2 pr-4 font-medium">Role</th>
                  <th scope="col" className="py-2 pr-4 font-medium">Joined</th>
                  <th scope="col" className="py-2 pr-4 font-medium">Last sign-in</th>
                  <th scope="col" className="py-2 font-medium">
                    <span className="sr-only">Remove</span>
                  </th>
                </tr>
              </thead>
              <tbody>
                {members.map((m) => {
                  const lastAdmin = m.role === "admin" && admins <= 1;
                  const noteId = `last-admin-${m.userId}`;
                  return (
                    <tr key={m.userId} className="border-b border-river-800 align-top" data-email={m.email}>
                      <td className="pt-4 pb-2.5 pr-4">
                        {m.login ? <span className="font-mono text-river-50">{m.login}</span> : <span className="text-river-300">not signed in yet</span>}
                        {m.userId === me ? <span className="ml-2 text-xs text-sand-300">you</span> : null}
                      </td>
                      <td className="pt-4 pb-2.5 pr-4 font-mono text-xs text-river-100">{m.email}</td>
                      <td className="py-2 pr-4">
                        <Form method="post" action={base} className="flex items-center gap-2">
                          <input type="hidden" name="intent" value="role" />
                          <input type="hidden" name="userId" value={m.userId} />
                          <label htmlFor={`role-${m.userId}`} className="sr-only">
                            Role of {memberLabel(m)}
                          </label>
                          <select
                            id={`role-${m.userId}`}
                            name="role"
                            defaultValue={m.role}
                            disabled={lastAdmin}
                            aria-describedby={lastAdmin ? noteId : undefined}
                            className={`${inputClass} w-32 py-1.5 disabled:opacity-60`}
                          >
                            {ROLE_CHOICES.map((r) => (
                              <option key={r} value={r}>
                                {r}
                              </option>
                            ))}
                          </select>
                          <Button type="submit" tone="quiet" className="py-1.5" disabled={lastAdmin} aria-label={`Save the role of ${memberLabel(m)}`}>
                            Save
                          </Button>
                        </Form>
                        {lastAdmin ? (
                          <p id={noteId} className="mt-1 max-w-xs text-xs text-river-300">
                            {LAST_ADMIN_NOTE}
                          </p>
                        ) : null}
                      </td>
                      <td className="pt-4 pb-2.5 pr-4 font-mono text-xs whitespace-nowrap">{utcMinute(m.joinedAt)}</td>
                      <td className="pt-4 pb-2.5 pr-4 font-mono text-xs whitespace-nowrap">
                        {m.lastSignInAt === null ? <span className="font-sans text-river-300">never</span> : utcMinute(m.lastSignInAt)}
                      </td>
                      <td className="py-2 text-right">
                        {lastAdmin ? (
                          <Button type="button" tone="danger" className="py-1.5 disabled:border-river-700" disabled aria-describedby={noteId}>
                            Remove…
                          </Button>
                        ) : (
                          <Link
                            to={`${base}?remove=${m.userId}`}
                            preventScrollReset
                            className="inline-flex rounded-md border border-red-400/60 px-3.5 py-1.5 text-sm font-medium text-red-200 hover:bg-red-950/60"
                            aria-label={`Remove ${memberLabel(m)}…`}
                          >
                            Remove…
                          </Link>
                        )}
                      </td>
                    </tr>
                  );
                })}
              </tbody>
            </table>
          </div>
          <p className="mt-3 text-xs text-river-300">
            Times are UTC. A viewer {ROLE_ABILITIES.viewer}; an engineer {ROLE_ABILITIES.engineer}; an admin {ROLE_ABILITIES.admin}.
          </p>
        </Panel>

        <div className="grid grid-cols-[minmax(0,1fr)] gap-6 lg:grid-cols-[minmax(0,24rem)_minmax(0,1fr)] lg:items-start">
          <InviteForm base={base} result={result?.intent === "invite" ? result : undefined} fakeMail={fakeMail} />
          <Panel title="Pending invitations">
            {invites.length === 0 ? (
              <EmptyState title="No invitations waiting">Invitations appear here until they are accepted, revoked or expire (after 7 days).</EmptyState>
            ) : (
              <div className="-m-1.5 overflow-x-auto p-1.5">
                <table className="sticky-first w-full text-left text-sm">
                  <caption className="sr-only">Invitations not yet accepted, soonest to expire first</caption>
                  <thead className="border-b border-river-700 text-xs tracking-wide text-river-300 uppercase">
                    <tr>
                      <th scope="col" className="py-2 pr-4 font-medium">E-mail</th>
                      <th scope="col" className="py-2 pr-4 font-medium">Role</th>
                      <th scope="col" className="py-2 pr-4 font-medium">Invited by</th>
                      <th scope="col" className="py-2 pr-4 font-medium">Expires</th>
                      <th scope="col" className="py-2 font-medium">
                        <span className="sr-only">Revoke</span>
                      </th>
                    </tr>
                  </thead>
                  <tbody>
                    {invites.map((i) => (
                      <tr key={i.id} className="border-b border-river-800" data-email={i.email}>
                        <td className="py-2.5 pr-4 font-mono text-xs text-river-50">{i.email}</td>
                        <td className="py-2.5 pr-4">{i.role}</td>
                        <td className="py-2.5 pr-4">{i.invitedBy ?? <span className="text-river-300">a removed user</span>}</td>
                        <td className="py-2.5 pr-4 font-mono text-xs whitespace-nowrap">{utcMinute(i.expiresAt)}</td>
                        <td className="py-2 text-right">
                          <Form method="post" action={base}>
                            <input type="hidden" name="intent" value="revoke" />
                            <input type="hidden" name="inviteId" value={i.id} />
                            <Button type="submit" tone="quiet" className="py-1.5" aria-label={`Revoke the invitation of ${i.email}`}>
                              Revoke
                            </Button>
                          </Form>
                        </td>
                      </tr>
                    ))}
                  </tbody>
                </table>
              </div>
            )}
          </Panel>
        </div>
      </div>
    </>
  );
}

function Outcome({ result }: { result: ActionResult }) {
  return result.ok ? (
    <p role="status" className="mb-6 rounded-md border-l-4 border-sand-400 bg-river-900 px-4 py-3 text-sm text-river-100">
      {result.message}
    </p>
  ) : (
    <p role="alert" className="mb-6 rounded-md border border-red-400/50 bg-red-950/30 px-4 py-3 text-sm text-red-100">
      {result.message}
    </p>
  );
}

function ConfirmRemoval({
  base,
  tenantName,
  member,
  self,
  lastAdmin,
}: {
  base: string;
  tenantName: string;
  member: { userId: number; login: string | null; email: string; role: Role };
  self: boolean;
  lastAdmin: boolean;
}) {
  return (
    <div role="alertdialog" aria-labelledby="confirm-remove-title" className="mb-4 rounded-md border border-red-400/50 bg-red-950/30 px-4 py-3">
      <p id="confirm-remove-title" className="font-medium text-red-100">
        Remove {memberLabel(member)} ({member.role}) from {tenantName}?
      </p>
      <p className="mt-1 text-sm text-red-200">
        {lastAdmin
          ? LAST_ADMIN_NOTE
          : self
            ? "You are removing yourself: you lose access to this tenant at once, and only another admin can invite you back."
            : "They lose access at once. Their entries in the Ledger stay; to let them back in, invite them again."}
      </p>
      <div className="mt-3 flex gap-2">
        <Form method="post" action={base}>
          <input type="hidden" name="intent" value="remove" />
          <input type="hidden" name="userId" value={member.userId} />
          <Button type="submit" tone="danger" disabled={lastAdmin}>
            Remove {memberLabel(member)}
          </Button>
        </Form>
        <Link to={base} preventScrollReset className="inline-flex items-center rounded-md border border-river-600 px-3.5 py-2 text-sm font-medium text-river-100 hover:border-river-400 hover:bg-river-800">
          Cancel
        </Link>
      </div>
    </div>
  );
}

function InviteForm({ base, result, fakeMail }: { base: string; result: ActionResult | undefined; fakeMail: boolean }) {
  const navigation = useNavigation();
  const sending = navigation.state === "submitting" && navigation.formData?.get("intent") === "invite";
  const errors = result && !result.ok ? result.fieldErrors ?? {} : {};
  return (
    <Panel title="Invite someone">
      {/* A new key after each sent invitation empties the form for the next one. */}
      <Form method="post" action={base} className="flex flex-col gap-4" key={result?.ok ? result.message : "editing"}>
        <input type="hidden" name="intent" value="invite" />
        <Field label="E-mail" htmlFor="invite-email" error={errors.email} hint="The address the invitation link is sent to.">
          <input
            id="invite-email"
            name="email"
            type="email"
            required
            autoComplete="off"
            placeholder="name@example.net"
            aria-invalid={errors.email ? true : undefined}
            className={`${inputClass} w-full`}
          />
        </Field>
        <Field label="Role" htmlFor="invite-role" error={errors.role} hint="What they may do once they accept (the roles are described under Members); you can change it later.">
          <select id="invite-role" name="role" defaultValue="viewer" aria-invalid={errors.role ? true : undefined} className={`${inputClass} w-full`}>
            {ROLE_CHOICES.map((r) => (
              <option key={r} value={r}>
                {r}
              </option>
            ))}
          </select>
        </Field>
        <div>
          <Button type="submit" disabled={sending}>
            {sending ? "Sending…" : "Send invitation"}
          </Button>
        </div>
        {result ? (
          <p role={result.ok ? "status" : "alert"} className={`text-sm ${result.ok ? "text-river-100" : "text-red-300"}`}>
            {result.message}
            {result.ok && result.mailCaught ? (
              <>
                {" "}
                The local fake SMTP server caught it:{" "}
                <a href="/dev/mail" className="text-sand-300 underline underline-offset-4 hover:text-sand-200">
                  caught mail
                </a>
                .
              </>
            ) : null}
          </p>
        ) : null}
        {fakeMail && !result ? <p className="text-xs text-river-300">Development or demo: e-mail goes to a local fake SMTP server; read it at /dev/mail.</p> : null}
      </Form>
    </Panel>
  );
}
