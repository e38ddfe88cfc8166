import { formatUtc } from "../slice/format.ts";

/**
 * A ledger time as the console writes every time (formatUtc), to the second: the order of
 * entries within a minute matters in an audit log.
 *
 * @example ledgerTime(Date.UTC(2025, 2, 1, 14, 5, 9)) // "2025-03-01 14:05:09 UTC"
 */
export function ledgerTime(ms: number): string {
  return formatUtc(ms, { seconds: true });
}

/** One particular of a ledger entry, as a key/value row. An empty label: text shown as stored. */
export interface DetailRow {
  label: string;
  value: string;
}

/**
 * A ledger entry's JSON particulars as readable key/value rows: `{ from: "viewer", to:
 * "engineer" }` reads "change: viewer → engineer", `{ old: {k: 1024}, new: {k: 2048} }` reads
 * "k: 1024 → 2048", other fields one row each ("expires at: 2025-03-08 14:05:09 UTC"), with
 * times (fields ending in "At" holding epoch milliseconds, or ISO 8601 text) in the console's
 * form, lists joined by commas and nested objects one row per field. Anything that is not a
 * JSON object is shown as it was stored, since an unreadable entry must still be visible.
 *
 * @example describeDetail('{"from":"viewer","to":"engineer"}') // [{ label: "change", value: "viewer → engineer" }]
 */
export function describeDetail(json: string | null): DetailRow[] {
  if (json === null || json === "") return [];
  let value: unknown;
  try {
    value = JSON.parse(json);
  } catch {
    return [{ label: "", value: json }];
  }
  if (!isRecord(value)) return [{ label: "", value: json }];
  const fields = { ...value };
  const rows: DetailRow[] = [];
  if ("from" in fields && "to" in fields) {
    rows.push({ label: "change", value: `${show("from", fields.from)} → ${show("to", fields.to)}` });
    delete fields.from;
    delete fields.to;
  }
  // A before/after pair of objects (settings.update): one row per field that changed.
  if (isRecord(fields.old) && isRecord(fields.new)) {
    const before = fields.old;
    const after = fields.new;
    for (const key of new Set([...Object.keys(before), ...Object.keys(after)])) {
      rows.push({ label: words(key), value: `${show(key, before[key])} → ${show(key, after[key])}` });
    }
    delete fields.old;
    delete fields.new;
  }
  for (const [key, field] of Object.entries(fields)) {
    if (field === undefined || field === null) continue;
    if (isRecord(field)) {
      for (const [inner, innerValue] of Object.entries(field)) rows.push({ label: `${words(key)} ${words(inner)}`, value: show(inner, innerValue) });
    } else {
      rows.push({ label: words(key), value: show(key, field) });
    }
  }
  return rows;
}

function isRecord(value: unknown): value is Record<string, unknown> {
  return typeof value === "object" && value !== null && !Array.isArray(value);
}

const ISO_INSTANT = /^\d{4}-\d{2}-\d{2}T\d{2}:\d{2}(:\d{2}(\.\d+)?)?(Z|[+-]\d{2}:\d{2})$/;

function show(key: string, value: unknown): string {
  if (typeof value === "number" && key.endsWith("At")) return ledgerTime(value);
  if (typeof value === "string" && ISO_INSTANT.test(value) && Number.isFinite(Date.parse(value))) return ledgerTime(Date.parse(value));
  if (typeof value === "string" || typeof value === "number" || typeof value === "boolean") return String(value);
  if (value === null || value === undefined) return "none";
  if (Array.isArray(value)) return value.map((v) => show(key, v)).join(", ");
  return JSON.stringify(value);
}

/** `expiresAt` → "expires at", `keyPrefix` → "key prefix". */
function words(key: string): string {
  return key.replace(/([a-z0-9])([A-Z])/g, "$1 $2").replace(/_/g, " ").toLowerCase();
}
