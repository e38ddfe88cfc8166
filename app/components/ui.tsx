import type { ButtonHTMLAttributes, ReactNode } from "react";
import { Form, Link } from "react-router";

/**
 * The console's small shared pieces, so every page has the same look: page header,
 * panels, buttons, fields, empty/loading/error states and the two cautions.
 */

export function PageHeader({ title, lead, actions }: { title: string; lead?: ReactNode; actions?: ReactNode }) {
  return (
    <header className="mb-6 flex flex-wrap items-end justify-between gap-4">
      <div>
        <h1 className="text-2xl font-semibold text-river-50">{title}</h1>
        {lead ? <p className="mt-1 max-w-3xl text-sm text-river-300">{lead}</p> : null}
      </div>
      {actions ? <div className="flex gap-2">{actions}</div> : null}
    </header>
  );
}

export function Panel({ title, children, className = "" }: { title?: ReactNode; children: ReactNode; className?: string }) {
  return (
    <section className={`rounded-lg border border-river-800 bg-river-900/60 p-5 ${className}`}>
      {title ? <h2 className="mb-3 text-sm font-semibold tracking-wide text-sand-300 uppercase">{title}</h2> : null}
      {children}
    </section>
  );
}

type Tone = "primary" | "quiet" | "danger";
const TONES: Record<Tone, string> = {
  primary: "bg-sand-300 text-river-950 hover:bg-sand-200 disabled:bg-river-700 disabled:text-river-300",
  quiet: "border border-river-600 text-river-100 hover:border-river-400 hover:bg-river-800 disabled:text-river-400",
  danger: "border border-red-400/60 text-red-200 hover:bg-red-950/60 disabled:text-river-400",
};

export function Button({ tone = "primary", className = "", ...props }: ButtonHTMLAttributes<HTMLButtonElement> & { tone?: Tone }) {
  return <button className={`inline-flex items-center gap-2 rounded-md px-3.5 py-2 text-sm font-medium transition-colors disabled:cursor-not-allowed ${TONES[tone]} ${className}`} {...props} />;
}

export function Field({ label, hint, error, children, htmlFor }: { label: string; hint?: ReactNode; error?: string; children: ReactNode; htmlFor: string }) {
  return (
    <div className="flex flex-col gap-1">
      <label htmlFor={htmlFor} className="text-sm font-medium text-river-100">
        {label}
      </label>
      {children}
      {error ? (
        <p role="alert" className="text-sm text-red-300">
          {error}
        </p>
      ) : hint ? (
        <p className="text-xs text-river-300">{hint}</p>
      ) : null}
    </div>
  );
}

/** Input styling shared by text inputs and selects. */
export const inputClass =
  "rounded-md border border-river-600 bg-river-950 px-3 py-2 text-sm text-river-50 placeholder:text-river-400 focus:border-sand-300 aria-[invalid=true]:border-red-400";

export function EmptyState({ title, children }: { title: string; children?: ReactNode }) {
  return (
    <div className="rounded-lg border border-dashed border-river-700 px-6 py-10 text-center">
      <p className="font-medium text-river-100">{title}</p>
      {children ? <div className="mt-2 text-sm text-river-300">{children}</div> : null}
    </div>
  );
}

export function LoadingState({ label = "Loading…" }: { label?: string }) {
  return (
    <p role="status" aria-live="polite" className="animate-pulse py-6 text-sm text-river-300">
      {label}
    </p>
  );
}

export function ErrorState({ title = "Could not load", message }: { title?: string; message: string }) {
  return (
    <div role="alert" className="rounded-lg border border-red-400/50 bg-red-950/30 px-4 py-3 text-sm text-red-100">
      <p className="font-medium">{title}</p>
      <p className="mt-1 text-red-200">{message}</p>
    </div>
  );
}

/** The two cautions Weir shows wherever numbers are shown. */
export function Cautions({ compact = false }: { compact?: boolean }) {
  const statistical = "Estimates are statistical: each comes with its 95% interval. For billing or legal disputes, use exact accounting.";
  const personal = "Flow records carry IP addresses, which can be personal data: keep them only as long as needed (retention) and follow your data-protection policy and local law.";
  if (compact) {
    return (
      <p className="text-xs text-river-300">
        {statistical} {personal}
      </p>
    );
  }
  return (
    <div className="grid gap-3 md:grid-cols-2">
      <p className="rounded-md border-l-4 border-sand-400 bg-river-900 px-4 py-3 text-sm text-river-200">{statistical}</p>
      <p className="rounded-md border-l-4 border-sand-400 bg-river-900 px-4 py-3 text-sm text-river-200">{personal}</p>
    </div>
  );
}

/**
 * The confirm step of a destructive action in a table, as a row under the one it acts on:
 * the consequence in words, the action's button, and Cancel (a link back to the page
 * without the confirm parameter).
 */
export function ConfirmRow({
  colSpan,
  action,
  fields,
  message,
  label,
  busyLabel,
  busy,
}: {
  colSpan: number;
  action: string;
  /** Hidden form fields: the intent and what it acts on. */
  fields: Record<string, string>;
  message: string;
  label: string;
  busyLabel: string;
  busy: boolean;
}) {
  return (
    <tr className="border-b border-river-800 bg-red-950/30">
      <td colSpan={colSpan} className="px-3 py-3">
        <Form method="post" action={action} preventScrollReset className="flex flex-wrap items-center gap-3">
          {Object.entries(fields).map(([name, value]) => (
            <input key={name} type="hidden" name={name} value={value} />
          ))}
          <p className="text-sm text-red-100">{message}</p>
          <Button tone="danger" type="submit" disabled={busy} autoFocus>
            {busy ? busyLabel : label}
          </Button>
          <Link to="." preventScrollReset className="text-sm text-river-200 underline-offset-4 hover:underline">
            Cancel
          </Link>
        </Form>
      </td>
    </tr>
  );
}

/**
 * A collector name: type a new one or pick an existing one from the list the browser offers.
 * `onType` runs on every change, so a form can check the name as it is typed.
 */
export function CollectorNameInput({
  id,
  value,
  onType,
  collectors,
  invalid,
  placeholder,
  required = false,
}: {
  id: string;
  value: string;
  onType: (value: string) => void;
  collectors: readonly string[];
  invalid: boolean;
  placeholder: string;
  required?: boolean;
}) {
  return (
    <>
      <input
        id={id}
        name="collector"
        list={`${id}-list`}
        required={required}
        value={value}
        onChange={(e) => onType(e.target.value)}
        autoComplete="off"
        spellCheck={false}
        placeholder={placeholder}
        aria-invalid={invalid ? true : undefined}
        className={`${inputClass} font-mono`}
      />
      <datalist id={`${id}-list`}>
        {collectors.map((c) => (
          <option key={c} value={c} />
        ))}
      </datalist>
    </>
  );
}

/** An age in words, measured on the server's clock. @example age(600_000, 0) // "10 min ago" */
export function age(now: number, then: number): string {
  const s = Math.max(0, Math.round((now - then) / 1000));
  if (s < 90) return `${s} s ago`;
  const min = Math.round(s / 60);
  if (min < 90) return `${min} min ago`;
  const h = Math.round(min / 60);
  if (h < 48) return `${h} h ago`;
  return `${Math.round(h / 24)} days ago`;
}
