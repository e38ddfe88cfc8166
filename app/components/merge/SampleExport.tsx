import { useId, useState, type FormEvent } from "react";
import { formatUtcMinute, parseUtcMinute, UTC_MINUTE_PATTERN } from "~/slice/format";
import { Button, Field, Panel, inputClass } from "../ui";

interface ExportError {
  code: string;
  message: string;
}

type ExportState = { phase: "idle" } | { phase: "fetching" } | { phase: "done"; fileName: string; bytes: number } | { phase: "failed"; error: ExportError };

function readError(status: number, text: string): ExportError {
  try {
    // The export's errors are { error: { code, message, details } }; the console's role checks answer { message }.
    const body = JSON.parse(text) as { error?: ExportError; message?: unknown };
    if (body.error && typeof body.error.message === "string") return body.error;
    if (typeof body.message === "string") return { code: `http_${status}`, message: body.message };
  } catch {
    // Not JSON (a proxy's page, for instance): fall through to the status line.
  }
  return { code: "export_failed", message: `The server answered ${status}.` };
}

/** The file name the server gave in Content-Disposition (RFC 6266 §4.1, the quoted form Weir sends). */
function fileNameOf(disposition: string | null): string {
  return /filename="([^"]+)"/.exec(disposition ?? "")?.[1] ?? "weir-samples.json";
}

/**
 * Exports the tenant's priority samples over a UTC range, for some collectors or every stream
 * collector, as one sample file (docs/sample-file.md): the same file as GET /api/v1/samples,
 * read with the session. The download is fetched first, so a refusal (a range too long, too
 * many kept records) shows here with its reason instead of replacing the page.
 */
export function SampleExport({ tenantSlug, collectors, copies, merges, defaults }: {
  tenantSlug: string;
  /** Stream collectors (copies among them). */
  collectors: string[];
  /** Copies (collectors filled by sample files) with the collectors they came from. */
  copies: Record<string, string[]>;
  merges: string[];
  defaults: { from: number; to: number };
}) {
  const id = useId();
  const action = `/t/${tenantSlug}/merge/export`;
  const [state, setState] = useState<ExportState>({ phase: "idle" });
  const [from, setFrom] = useState(formatUtcMinute(defaults.from));
  const [to, setTo] = useState(formatUtcMinute(defaults.to));
  const badFrom = parseUtcMinute(from) === null;
  const badTo = parseUtcMinute(to) === null;

  async function submit(event: FormEvent<HTMLFormElement>) {
    event.preventDefault();
    if (badFrom || badTo) {
      setState({ phase: "failed", error: { code: "invalid_form", message: "Give From and To as a UTC date and 24-hour time, e.g. 2024-05-01 14:05." } });
      return;
    }
    const query = new URLSearchParams();
    for (const [name, value] of new FormData(event.currentTarget)) if (typeof value === "string") query.append(name, value);
    setState({ phase: "fetching" });
    try {
      const response = await fetch(`${action}?${query}`, { headers: { accept: "application/json" } });
      if (!response.ok) return setState({ phase: "failed", error: readError(response.status, await response.text()) });
      const blob = await response.blob();
      const fileName = fileNameOf(response.headers.get("content-disposition"));
      const url = URL.createObjectURL(blob);
      const link = document.createElement("a");
      link.href = url;
      link.download = fileName;
      document.body.append(link);
      link.click();
      link.remove();
      // Revoked on the next tick: some browsers start the download only after the click handler returns.
      setTimeout(() => URL.revokeObjectURL(url), 0);
      setState({ phase: "done", fileName, bytes: blob.size });
    } catch {
      setState({ phase: "failed", error: { code: "network", message: "The export could not be fetched; check the connection and try again." } });
    }
  }

  const names = [...collectors, ...merges];
  return (
    <Panel title="Export a sample file">
      <p className="mb-4 max-w-3xl text-sm text-river-300">
        The kept records, τ and exact counters of every window whose start lies in the range, as one sample file that another Weir can import (Upload, below,
        or <code className="font-mono text-river-100">POST /api/v1/samples</code>). It holds flow records with their IP addresses, which can be personal data:
        store and share it under your data-protection policy. Each export is written to the Ledger.
      </p>
      {/* Without a script, the form still works: the browser asks the same URL and saves the file. */}
      <form method="get" action={action} onSubmit={submit} noValidate className="flex flex-col gap-4">
        <fieldset className="flex flex-col gap-2">
          <legend className="mb-1 text-sm font-medium text-river-100">Collectors</legend>
          <div className="flex max-h-52 flex-wrap gap-x-5 gap-y-1.5 overflow-y-auto">
            {names.map((name) => (
              <label key={name} className="inline-flex items-center gap-2 text-sm text-river-100">
                <input type="checkbox" name="collectors" value={name} className="accent-sand-300" />
                <span className="font-mono">{name}</span>
                {copies[name] ? <span className="text-xs text-river-300">copy of {copies[name].join(", ")}</span> : null}
                {merges.includes(name) ? <span className="text-xs text-river-300">merge</span> : null}
              </label>
            ))}
          </div>
          <p className="text-xs text-river-300">None chosen: every stream collector; copies and merges only when picked.</p>
        </fieldset>
        <div className="grid gap-4 sm:grid-cols-2 lg:grid-cols-[minmax(0,14rem)_minmax(0,14rem)_auto] lg:items-end">
          <Field label="Export from (UTC, 24 h)" htmlFor={`${id}-from`} hint="Windows starting at or after this time.">
            <input
              id={`${id}-from`}
              name="from"
              type="text"
              inputMode="numeric"
              pattern={UTC_MINUTE_PATTERN}
              placeholder="YYYY-MM-DD HH:MM"
              autoComplete="off"
              value={from}
              onChange={(e) => setFrom(e.target.value)}
              aria-invalid={badFrom}
              className={`${inputClass} font-mono placeholder:font-sans placeholder:italic`}
            />
          </Field>
          <Field label="Export to (UTC, 24 h)" htmlFor={`${id}-to`} hint="Windows starting before this time.">
            <input
              id={`${id}-to`}
              name="to"
              type="text"
              inputMode="numeric"
              pattern={UTC_MINUTE_PATTERN}
              placeholder="YYYY-MM-DD HH:MM"
              autoComplete="off"
              value={to}
              onChange={(e) => setTo(e.target.value)}
              aria-invalid={badTo}
              className={`${inputClass} font-mono placeholder:font-sans placeholder:italic`}
            />
          </Field>
          <div className="lg:pb-6">
            <Button type="submit" tone="quiet" disabled={state.phase === "fetching"}>
              {state.phase === "fetching" ? "Exporting…" : "Download sample file"}
            </Button>
          </div>
        </div>
        <p role="status" aria-live="polite" className="text-sm text-river-100 empty:hidden">
          {state.phase === "done" ? `Saved ${state.fileName} (${state.bytes.toLocaleString("en-US")} bytes).` : ""}
        </p>
        {state.phase === "failed" ? (
          <p role="alert" className="text-sm text-red-300">
            Not exported: {state.error.message}
          </p>
        ) : null}
      </form>
    </Panel>
  );
}
