import { useId, useRef, useState, type FormEvent } from "react";
import { useRevalidator } from "react-router";
// A type only: erased from the client bundle.
import type { IpfixUploadSummary } from "~/ingest/ipfix-upload.server";
import { Button, Cautions, Field, Panel, inputClass } from "../ui";

/** What the upload route answers on success (see app/samples/import.server.ts). */
export interface UploadSummary {
  collector: string;
  /** The collectors the imported files came from: the target is a copy of them. */
  copyOf: string[];
  windows: number;
  mergedWithExisting: number;
  kept: number;
  records: number | string;
  from: string | null;
  to: string | null;
}

interface UploadError {
  code: string;
  message: string;
  details?: { path: string; message: string }[];
}

type UploadState =
  | { phase: "idle" }
  | { phase: "sending"; sentBytes: number; totalBytes: number }
  | { phase: "done"; summary: UploadSummary | IpfixUploadSummary; totalBytes: number }
  | { phase: "failed"; error: UploadError };

/** "1.5 MiB": binary units, as the body limit is stated in bytes. */
export function formatBytes(bytes: number): string {
  if (bytes < 1024) return `${bytes} B`;
  const units = ["KiB", "MiB", "GiB"];
  let value = bytes / 1024;
  let unit = 0;
  while (value >= 1024 && unit < units.length - 1) {
    value /= 1024;
    unit += 1;
  }
  return `${value.toFixed(value < 10 ? 1 : 0)} ${units[unit]}`;
}

function readError(status: number, text: string): UploadError {
  try {
    // The import's errors are { error: { code, message, details } }; the console's role checks answer { message }.
    const body = JSON.parse(text) as { error?: UploadError; message?: unknown };
    if (body.error && typeof body.error.message === "string") return body.error;
    if (typeof body.message === "string") return { code: `http_${status}`, message: body.message };
  } catch {
    // Not JSON (a proxy's page, for instance): fall through to the status line.
  }
  return { code: "upload_failed", message: `The server answered ${status}.` };
}

/**
 * Uploads one sample file (exported by GET /api/v1/samples) into a collector of the tenant.
 * XMLHttpRequest rather than fetch, because only its `upload.onprogress` reports the bytes sent.
 */
export function SampleUpload({ tenantSlug, collectors, maxBytes }: { tenantSlug: string; collectors: string[]; maxBytes: number }) {
  const id = useId();
  const formRef = useRef<HTMLFormElement>(null);
  // The page's loaders list collectors: a new one made by this upload shows without a reload.
  const revalidator = useRevalidator();
  const [state, setState] = useState<UploadState>({ phase: "idle" });
  const [fileError, setFileError] = useState<string | undefined>();

  function onSubmit(event: FormEvent<HTMLFormElement>) {
    event.preventDefault();
    const form = new FormData(event.currentTarget);
    const file = form.get("file");
    if (!(file instanceof File) || file.size === 0) {
      setFileError("Choose a sample file (.json) or an IPFIX file (.ipfix) to upload.");
      return;
    }
    if (file.size > maxBytes) {
      setFileError(`The file is ${formatBytes(file.size)}; uploads are limited to ${formatBytes(maxBytes)} (${maxBytes} bytes).`);
      return;
    }
    setFileError(undefined);
    setState({ phase: "sending", sentBytes: 0, totalBytes: file.size });

    const uploadPath = `/t/${encodeURIComponent(tenantSlug)}/merge/upload`;
    const request = new XMLHttpRequest();
    request.open("POST", uploadPath);
    request.upload.onprogress = (progress) => {
      if (progress.lengthComputable) setState({ phase: "sending", sentBytes: progress.loaded, totalBytes: progress.total });
    };
    // A small file may go out in one piece without a progress event: the end of the upload still shows.
    request.upload.onload = () => setState((now) => (now.phase === "sending" ? { ...now, sentBytes: now.totalBytes } : now));
    request.onload = () => {
      // XMLHttpRequest follows redirects by itself: landing elsewhere means the session ended.
      if (new URL(request.responseURL, window.location.href).pathname !== uploadPath) {
        setState({ phase: "failed", error: { code: "signed_out", message: "Your session has ended. Sign in again, then upload the file once more." } });
        return;
      }
      if (request.status >= 200 && request.status < 300) {
        try {
          setState({ phase: "done", summary: JSON.parse(request.responseText) as UploadSummary | IpfixUploadSummary, totalBytes: file.size });
          formRef.current?.reset();
          void revalidator.revalidate();
        } catch {
          setState({ phase: "failed", error: { code: "upload_failed", message: "The server's answer could not be read." } });
        }
      } else {
        setState({ phase: "failed", error: readError(request.status, request.responseText) });
      }
    };
    request.onerror = () => setState({ phase: "failed", error: { code: "network_error", message: "The upload did not reach the server (network error)." } });
    request.send(form);
  }

  const sending = state.phase === "sending";
  return (
    <Panel title="Upload a sample file or an IPFIX file">
      <p className="mb-4 max-w-3xl text-sm text-river-200">
        A <strong>sample file</strong>'s windows become reservoirs of the collector you name, which becomes a <strong>copy</strong> of the collectors the
        file came from: counted only when picked. Name a new collector or an earlier copy, not one that receives records live. The same file, or a window
        already imported, is refused, since its records would be counted twice. An <strong>IPFIX file</strong> (RFC 5655, as probes and collectors write them) is sampled
        into the collector like records sent to it; records of the same flows already sent would be counted twice too. A file is applied whole or
        not at all.
      </p>
      <form ref={formRef} onSubmit={onSubmit} encType="multipart/form-data" className="grid gap-4 md:grid-cols-[1fr_1fr_auto] md:items-start">
        <Field label="Collector" htmlFor={`${id}-collector`} hint="An existing collector, or a new name to create one.">
          <input
            id={`${id}-collector`}
            name="collector"
            required
            maxLength={64}
            list={`${id}-collectors`}
            autoComplete="off"
            placeholder="site-b-offline"
            className={inputClass}
            disabled={sending}
          />
          <datalist id={`${id}-collectors`}>
            {collectors.map((name) => (
              <option key={name} value={name} />
            ))}
          </datalist>
        </Field>
        <Field label="File" htmlFor={`${id}-file`} error={fileError} hint={`A sample file (JSON from the sample export) or an IPFIX file (.ipfix), at most ${formatBytes(maxBytes)}.`}>
          <input
            id={`${id}-file`}
            name="file"
            type="file"
            required
            accept=".json,application/json,.ipfix,application/ipfix"
            aria-invalid={fileError ? true : undefined}
            className={`${inputClass} file:mr-3 file:rounded file:border-0 file:bg-river-800 file:px-2 file:py-1 file:text-river-100`}
            disabled={sending}
            onChange={() => setFileError(undefined)}
          />
        </Field>
        <div className="md:pt-6">
          <Button type="submit" disabled={sending} className="min-w-28 justify-center">
            {sending ? "Uploading…" : "Upload"}
          </Button>
        </div>
      </form>

      {state.phase === "sending" ? <UploadProgress sentBytes={state.sentBytes} totalBytes={state.totalBytes} /> : null}
      {state.phase === "done" ? (
        <>
          <UploadProgress sentBytes={state.totalBytes} totalBytes={state.totalBytes} done />
          {"kind" in state.summary ? <IpfixResult summary={state.summary} /> : <UploadResult summary={state.summary} />}
        </>
      ) : null}
      {state.phase === "failed" ? <UploadFailure error={state.error} /> : null}

      <div className="mt-4">
        <Cautions compact />
      </div>
    </Panel>
  );
}

function UploadProgress({ sentBytes, totalBytes, done = false }: { sentBytes: number; totalBytes: number; done?: boolean }) {
  const percent = totalBytes > 0 ? Math.min(100, Math.round((sentBytes / totalBytes) * 100)) : 0;
  return (
    <div className="mt-4" role="status" aria-live="polite">
      <div
        className="h-2 w-full overflow-hidden rounded bg-river-800"
        role="progressbar"
        aria-label="Upload progress"
        aria-valuemin={0}
        aria-valuemax={100}
        aria-valuenow={percent}
      >
        <div className="h-full bg-sand-300 transition-[width]" style={{ width: `${percent}%` }} />
      </div>
      <p className="mt-1 text-xs text-river-300">
        {percent}% · {formatBytes(sentBytes)} of {formatBytes(totalBytes)}
        {done ? " · sent and imported" : percent === 100 ? " · merging on the server…" : ""}
      </p>
    </div>
  );
}

function UploadResult({ summary }: { summary: UploadSummary }) {
  const range = summary.from && summary.to ? `${summary.from} – ${summary.to}` : "no windows";
  return (
    <div role="status" className="mt-4 rounded-md border border-emerald-400/40 bg-emerald-950/30 px-4 py-3 text-sm text-emerald-100">
      <p className="font-medium">Imported into collector “{summary.collector}”.</p>
      <dl className="mt-2 grid grid-cols-2 gap-x-6 gap-y-1 sm:grid-cols-4">
        <div>
          <dt className="text-xs text-emerald-300">windows stored</dt>
          <dd className="tabular-nums">{summary.windows}</dd>
        </div>
        <div>
          <dt className="text-xs text-emerald-300">merged with existing</dt>
          <dd className="tabular-nums">{summary.mergedWithExisting}</dd>
        </div>
        <div>
          <dt className="text-xs text-emerald-300">kept records</dt>
          <dd className="tabular-nums">{summary.kept}</dd>
        </div>
        <div>
          <dt className="text-xs text-emerald-300">records seen (exact)</dt>
          <dd className="tabular-nums">{String(summary.records)}</dd>
        </div>
      </dl>
      <p className="mt-2 text-xs text-emerald-300">Time range: {range}</p>
      {summary.copyOf.length > 0 ? (
        <p className="mt-1 text-xs text-emerald-300">
          “{summary.collector}” is a copy of {summary.copyOf.join(", ")}: Slice counts it only when it is picked, never together with {summary.copyOf.length === 1 ? "that collector" : "those collectors"}.
        </p>
      ) : null}
    </div>
  );
}

function IpfixResult({ summary }: { summary: IpfixUploadSummary }) {
  const range = summary.from && summary.to ? `${summary.from} – ${summary.to}` : "no windows";
  const { ipfix } = summary;
  return (
    <div role="status" className="mt-4 rounded-md border border-emerald-400/40 bg-emerald-950/30 px-4 py-3 text-sm text-emerald-100">
      <p className="font-medium">IPFIX file sampled into collector “{summary.collector}”.</p>
      <dl className="mt-2 grid grid-cols-2 gap-x-6 gap-y-1 sm:grid-cols-4">
        <div>
          <dt className="text-xs text-emerald-300">messages</dt>
          <dd className="tabular-nums">{ipfix.messages}</dd>
        </div>
        <div>
          <dt className="text-xs text-emerald-300">flow records stored</dt>
          <dd className="tabular-nums">{summary.accepted}</dd>
        </div>
        <div>
          <dt className="text-xs text-emerald-300">unusable records</dt>
          <dd className="tabular-nums" title="Data records without addresses, protocol, or positive byte and packet counts: not stored">
            {ipfix.unusable}
          </dd>
        </div>
        <div>
          <dt className="text-xs text-emerald-300">windows</dt>
          <dd className="tabular-nums">{summary.windows}</dd>
        </div>
      </dl>
      {ipfix.samplingInterval !== null ? (
        <p className="mt-2 text-xs text-amber-200">
          The file announces packet sampling of 1 in {ipfix.samplingInterval}: its byte and packet counters were multiplied by {ipfix.samplingInterval}.
        </p>
      ) : null}
      {ipfix.enterpriseElements.length > 0 ? (
        <p className="mt-2 text-xs text-emerald-300">
          Enterprise-specific elements skipped: {ipfix.enterpriseElements.map((e) => `${e.enterprise}/${e.id} ×${e.count}`).join(", ")}
        </p>
      ) : null}
      <p className="mt-2 text-xs text-emerald-300">Time range: {range}</p>
    </div>
  );
}

/** Headings for the refusals that protect against counting records twice (import.server.ts). */
const REFUSAL_TITLES: Record<string, string> = {
  duplicate_import: "Upload refused: this file was imported already",
  overlapping_import: "Upload refused: a window of this file was imported already",
  live_collector: "Upload refused: the collector receives live records",
};

function UploadFailure({ error }: { error: UploadError }) {
  const details = error.details ?? [];
  return (
    <div role="alert" className="mt-4 rounded-md border border-red-400/50 bg-red-950/30 px-4 py-3 text-sm text-red-100">
      <p className="font-medium">{REFUSAL_TITLES[error.code] ?? "Upload refused"}</p>
      <p className="mt-1 text-red-200">{error.message}</p>
      {details.length > 0 ? (
        <ul className="mt-2 space-y-0.5 font-mono text-xs text-red-200">
          {details.map((detail, index) => (
            <li key={`${detail.path}-${index}`}>
              <span className="text-red-300">{detail.path || "(file)"}</span>: {detail.message}
            </li>
          ))}
        </ul>
      ) : null}
    </div>
  );
}
