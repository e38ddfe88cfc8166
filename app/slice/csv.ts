/**
 * The Slice results as CSV (RFC 4180): a header line, one line for the whole subset and one
 * per group, CRLF line breaks, and fields quoted only when they must be.
 *
 * RFC 4180 has no comments; the first line starts with "#", which spreadsheet and data tools
 * can skip (common practice, e.g. pandas `comment="#"`), and holds no comma or quote, so a
 * reader that does not skip it still sees one field.
 *
 * Pure module: no I/O, usable in the browser and on the server.
 */
import type { EstimateAnswer, IntervalJson } from "../query/answer.ts";

export const CSV_COLUMNS = ["key", "estimate", "std_error", "ci95_low", "ci95_high", "kept", "rough", "method", "rough_reason"] as const;

/** The key of the line that holds the whole subset, ahead of the groups. */
export const TOTAL_KEY = "total";

/**
 * One field: quoted when it holds a comma, a double quote, CR or LF, with each double quote
 * doubled (RFC 4180 §2, rules 6 and 7).
 *
 * @example csvField("198.51.100.0/24") // "198.51.100.0/24"
 * @example csvField('say "hi", then')  // "\"say \"\"hi\"\", then\""
 */
export function csvField(value: string): string {
  return /[",\r\n]/.test(value) ? `"${value.replace(/"/g, '""')}"` : value;
}

/** One record: fields joined by commas (RFC 4180 §2, rule 4), without its line break. */
export function csvRecord(fields: readonly string[]): string {
  return fields.map(csvField).join(",");
}

function row(key: string, e: IntervalJson): string {
  return csvRecord([
    key,
    String(e.estimate),
    String(e.stdError),
    String(e.ci95[0]),
    String(e.ci95[1]),
    String(e.kept),
    String(e.rough),
    e.method,
    e.roughReason ?? "",
  ]);
}

/**
 * The answer as a CSV document. `query` describes the question in one line without commas
 * (`describeQuery` in query-state.ts); every line ends in CRLF (RFC 4180 §2, rules 1 and 2).
 */
export function estimatesCsv(answer: EstimateAnswer, tenant: string, query: string): string {
  const comment =
    `# Weir estimates for tenant ${tenant} are statistical (priority sampling; 95% intervals: method normal = estimate ± 1.96 SE; ` +
    `gamma = Fay-Feuer gamma interval where the normal approximation would be poor and then rough with its reason; ` +
    `no-match = no sampled record matched and the interval is 0 up to a bound) and not exact accounting: for billing use exact counts.` +
    // How the groups were chosen (selection.ts): the winner's-curse note travels with the numbers.
    `${answer.selection ? ` Groups: ${answer.selection.note}` : ""} Query: ${query}`;
  const lines = [comment.replace(/[,"\r\n]/g, " "), csvRecord(CSV_COLUMNS), row(TOTAL_KEY, answer), ...answer.groups.map((g) => row(g.key, g))];
  return lines.map((line) => `${line}\r\n`).join("");
}

/** A file name for the export, e.g. `weir-riverline-bytes-by-dst-20240501T0200Z.csv`. */
export function csvFileName(tenant: string, metric: string, groupBy: string | null, from: number): string {
  const stamp = new Date(from).toISOString().slice(0, 16).replace(/[-:]/g, "");
  return `weir-${tenant}-${metric}${groupBy ? `-by-${groupBy}` : ""}-${stamp}Z.csv`;
}
