import { useRef, useState, type RefObject } from "react";
import type { ScopeChoice } from "./scope";

/**
 * The panel that shows a new key's secret, the one time it exists outside the collector
 * that will use it: the server keeps only its SHA-256, so this page cannot show it again.
 */
export function SecretOnce({
  secret,
  prefix,
  collector,
  scope,
  origin,
}: {
  secret: string;
  prefix: string;
  collector: string;
  scope: ScopeChoice;
  origin: string;
}) {
  const secretRef = useRef<HTMLInputElement>(null);
  const curlRef = useRef<HTMLPreElement>(null);
  const curl = curlLines(origin, secret, scope);
  return (
    <section aria-labelledby="new-key-title" className="mb-8 rounded-lg border-2 border-sand-400 bg-sand-950/70 p-5">
      <h2 id="new-key-title" className="text-lg font-semibold text-sand-100">
        {`Key ${prefix} created for collector ${collector}`}
      </h2>
      <p role="alert" className="mt-1 text-sm text-sand-200">
        Copy the secret now: it will not be shown again. Weir stores only its SHA-256 hash; if it is lost, create a new key and revoke this one.
      </p>
      <div className="mt-4 flex flex-wrap items-center gap-2">
        <label htmlFor="new-key-secret" className="sr-only">
          {`Secret of key ${prefix}`}
        </label>
        <input
          id="new-key-secret"
          ref={secretRef}
          readOnly
          value={secret}
          spellCheck={false}
          autoComplete="off"
          onFocus={(e) => e.currentTarget.select()}
          className="min-w-0 flex-1 rounded-md border border-sand-600 bg-river-950 px-3 py-2 font-mono text-sm text-sand-100"
        />
        <CopyButton target={secretRef} label="Copy key" />
      </div>
      <div className="mt-4">
        <div className="flex flex-wrap items-center justify-between gap-2">
          <p className="text-sm text-river-200">
            {scope === "query" ? "Try it: ask for the last hour's bytes per collector." : "Try it: send one flow record (documentation addresses)."}
          </p>
          <CopyButton target={curlRef} label="Copy curl" />
        </div>
        <pre
          ref={curlRef}
          className="mt-2 overflow-x-auto rounded-md border border-river-700 bg-river-950 p-3 font-mono text-xs leading-relaxed text-river-100"
        >
          {curl}
        </pre>
      </div>
    </section>
  );
}

/** A ready command for the new key; `both` shows ingest, the first thing a new collector does. */
export function curlLines(origin: string, secret: string, scope: ScopeChoice): string {
  if (scope === "query") {
    return [
      `curl -sS -G ${origin}/api/v1/estimate \\`,
      `  -H "Authorization: Bearer ${secret}" \\`,
      `  --data-urlencode "from=$(date -u -d '1 hour ago' +%Y-%m-%dT%H:%M:%SZ)" \\`,
      `  --data-urlencode "to=$(date -u +%Y-%m-%dT%H:%M:%SZ)" \\`,
      `  --data-urlencode "groupBy=collector"`,
    ].join("\n");
  }
  return [
    `curl -sS -X POST ${origin}/api/v1/flows \\`,
    `  -H "Authorization: Bearer ${secret}" \\`,
    `  -H "Content-Type: application/json" \\`,
    `  --data '[{"src":"192.0.2.10","dst":"198.51.100.20","sport":51000,"dport":443,"proto":6,"bytes":1500,"packets":3}]'`,
  ].join("\n");
}

function CopyButton({ target, label }: { target: RefObject<HTMLElement | null>; label: string }) {
  const [state, setState] = useState<"idle" | "copied" | "selected">("idle");
  async function copy() {
    const el = target.current;
    if (!el) return;
    const text = el instanceof HTMLInputElement ? el.value : (el.textContent ?? "");
    try {
      // Absent outside secure contexts (plain http to another host) and refused without permission.
      if (!navigator.clipboard) throw new Error("clipboard unavailable");
      await navigator.clipboard.writeText(text);
      setState("copied");
    } catch {
      selectContents(el);
      setState("selected");
    }
  }
  return (
    <span className="inline-flex items-center gap-2">
      <button type="button" onClick={copy} className="rounded-md bg-sand-300 px-3.5 py-2 text-sm font-medium text-river-950 hover:bg-sand-200">
        {label}
      </button>
      <span aria-live="polite" className="text-xs text-sand-200">
        {state === "copied" ? "Copied" : state === "selected" ? "Selected: press Ctrl+C (⌘C on a Mac)" : ""}
      </span>
    </span>
  );
}

/** The fallback when the clipboard is out of reach: select the text so the keyboard copies it. */
function selectContents(el: HTMLElement) {
  if (el instanceof HTMLInputElement) {
    el.focus();
    el.select();
    return;
  }
  const range = document.createRange();
  range.selectNodeContents(el);
  const selection = window.getSelection();
  selection?.removeAllRanges();
  selection?.addRange(range);
}
