/** `2025-03-01T14:05:09Z`: UTC, ISO 8601, to the second (the ledger's precision). */
export function utcSecond(ms: number): string {
  return `${new Date(ms).toISOString().slice(0, 19)}Z`;
}

/**
 * A ledger entry's JSON particulars as one readable line: `{ from: "viewer", to: "engineer" }`
 * reads "viewer → engineer", other fields "expires at: 2025-03-08T14:05:09Z", times (fields
 * ending in "At", epoch milliseconds) in UTC. Anything that is not a JSON object is shown as
 * it was stored, since an unreadable entry must still be visible.
 */
export function describeDetail(json: string | null): string {
  if (json === null || json === "") return "";
  let value: unknown;
  try {
    value = JSON.parse(json);
  } catch {
    return json;
  }
  if (typeof value !== "object" || value === null || Array.isArray(value)) return json;
  const fields = { ...(value as Record<string, unknown>) };
  const parts: string[] = [];
  if ("from" in fields && "to" in fields) {
    parts.push(`${show("from", fields.from)} → ${show("to", fields.to)}`);
    delete fields.from;
    delete fields.to;
  }
  for (const [key, field] of Object.entries(fields)) {
    if (field === undefined || field === null) continue;
    parts.push(`${words(key)}: ${show(key, field)}`);
  }
  return parts.join("; ");
}

function show(key: string, value: unknown): string {
  if (typeof value === "number" && key.endsWith("At")) return utcSecond(value);
  if (typeof value === "string" || typeof value === "number" || typeof value === "boolean") return String(value);
  if (value === null || value === undefined) return "none";
  return JSON.stringify(value);
}

/** `expiresAt` → "expires at", `keyPrefix` → "key prefix". */
function words(key: string): string {
  return key.replace(/([a-z0-9])([A-Z])/g, "$1 $2").replace(/_/g, " ").toLowerCase();
}
