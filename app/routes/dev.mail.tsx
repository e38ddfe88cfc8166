import { Fragment } from "react";
import { data, useLoaderData } from "react-router";
import { EmptyState, PageHeader } from "~/components/ui";
import type { Route } from "./+types/dev.mail";

export { ErrorBoundary } from "~/components/ErrorPanel";

export const meta: Route.MetaFunction = () => [
  { title: "Caught mail · Weir (development)" },
  // Invitation links in caught messages are live secrets of this development server.
  { name: "referrer", content: "no-referrer" },
];

/**
 * /dev/mail: what the local fake SMTP server caught, newest first. It exists only while
 * that fake is in use, which is never in production (SMTP_URL is required there) except in
 * demo mode, and the check below says so twice rather than trusting one condition.
 */
export function loader({ context }: Route.LoaderArgs) {
  const caught = context.env.NODE_ENV === "production" && !context.env.WEIR_DEMO ? null : context.mail.caught();
  if (caught === null) throw data({ message: "Caught mail exists only in development and the demo, when Weir runs its local fake SMTP server (SMTP_URL unset)." }, { status: 404 });
  return { messages: caught };
}

export default function DevMail() {
  const { messages } = useLoaderData<typeof loader>();
  return (
    <main className="mx-auto w-full max-w-5xl px-6 py-10">
      <p className="mb-4 rounded-md bg-sand-950 px-4 py-2 text-sm text-sand-200">
        Development or demo only: these messages went to the local fake SMTP server started by Weir and were not delivered to anyone. The last 200 are kept in memory until the server stops.
      </p>
      <PageHeader
        title="Caught mail"
        lead={`${messages.length} ${messages.length === 1 ? "message" : "messages"}, newest first. Times in UTC.`}
        actions={
          <a href="/console" className="rounded-md border border-river-600 px-3.5 py-2 text-sm font-medium text-river-100 hover:border-river-400 hover:bg-river-800">
            Back to the console
          </a>
        }
      />
      {messages.length === 0 ? (
        <EmptyState title="No mail caught yet">Invite someone from a tenant's People page; the invitation e-mail appears here.</EmptyState>
      ) : (
        <ol className="grid gap-4">
          {messages.map((m, i) => (
            <li key={`${m.date}-${i}`} className="rounded-lg border border-river-800 bg-river-900/60 p-5">
              <h2 className="text-lg font-semibold text-river-50">{m.subject || <span className="text-river-300">(no subject)</span>}</h2>
              <dl className="mt-2 grid grid-cols-[auto_1fr] gap-x-4 gap-y-1 text-sm">
                <dt className="text-river-300">From</dt>
                <dd className="font-mono text-xs leading-5 text-river-100">{m.from}</dd>
                <dt className="text-river-300">To</dt>
                <dd className="font-mono text-xs leading-5 text-river-100">{m.to.join(", ")}</dd>
                <dt className="text-river-300">Date</dt>
                <dd className="font-mono text-xs leading-5 text-river-100">{m.date.slice(0, 19)}Z</dd>
              </dl>
              <pre className="mt-4 overflow-x-auto rounded-md border border-river-800 bg-river-950 p-4 font-sans text-sm whitespace-pre-wrap text-river-200">
                <Linked text={m.text} />
              </pre>
            </li>
          ))}
        </ol>
      )}
    </main>
  );
}

/** The message text with its http(s) links made clickable, so an invitation can be followed from here. */
function Linked({ text }: { text: string }) {
  const parts = text.split(/(https?:\/\/[^\s<>"]+)/g);
  return (
    <>
      {parts.map((part, i) =>
        i % 2 === 1 ? (
          <a key={i} href={part} className="break-all text-sand-300 underline underline-offset-4 hover:text-sand-200">
            {part}
          </a>
        ) : (
          <Fragment key={i}>{part}</Fragment>
        ),
      )}
    </>
  );
}
