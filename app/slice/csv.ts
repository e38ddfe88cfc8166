/**
 * The Slice results as CSV (RFC 4180): a header line, one line for the whole subset and one
 * per group, CRLF line breaks, and fields quoted only when they must be.
 *
 * RFC 4180 has no comments and spreadsheet tools take the first line as the header, so the
 * caution travels as data: the last column, `note`, holds it on the first data line (the whole
 * subset) and is empty below. Every line has the same fields (RFC 4180 §2, rule 4).
 *
 * The columns are one list (`CSV_COLUMNS`): a new column is one entry there.
 *
 * Pure module: no I/O, usable in the browser and on the server.
 */
import type { EstimateAnswer, IntervalJson } from "../query/answer.ts";
import type { RateJson } from "../query/rate.ts";

/** One line's figures: the whole subset or one group, with the answer it belongs to. */
export interface CsvLine {
  key: string;
  figures: IntervalJson & { rate?: RateJson };
  answer: EstimateAnswer;
}

export interface CsvColumn {
  name: string;
  value(line: CsvLine): string;
}

/** The columns in file order; `note` stays last, so the caution reads after the figures. */
export const CSV_COLUMNS: readonly CsvColumn[] = [
  { name: "key", value: (l) => l.key },
  { name: "estimate", value: (l) => String(l.figures.estimate) },
  { name: "std_error", value: (l) => String(l.figures.stdError) },
  { name: "ci95_low", value: (l) => String(l.figures.ci95[0]) },
  { name: "ci95_high", value: (l) => String(l.figures.ci95[1]) },
  { name: "kept", value: (l) => String(l.figures.kept) },
  { name: "rough", value: (l) => String(l.figures.rough) },
  { name: "method", value: (l) => l.figures.method },
  { name: "rough_reason", value: (l) => l.figures.roughReason ?? "" },
];

/**
 * With unit "rate", after the totals' columns: the rate of each line (the answer's `rate`,
 * rate.ts) — the totals' figures × 8 / seconds for bytes (bit/s), / seconds otherwise.
 */
export const RATE_COLUMNS: readonly CsvColumn[] = [
  { name: "rate_unit", value: (l) => l.figures.rate?.unit ?? "" },
  { name: "rate_seconds", value: (l) => (l.figures.rate ? String(l.figures.rate.seconds) : "") },
  { name: "rate", value: (l) => (l.figures.rate ? String(l.figures.rate.estimate) : "") },
  { name: "rate_std_error", value: (l) => (l.figures.rate ? String(l.figures.rate.stdError) : "") },
  { name: "rate_ci95_low", value: (l) => (l.figures.rate ? String(l.figures.rate.ci95[0]) : "") },
  { name: "rate_ci95_high", value: (l) => (l.figures.rate ? String(l.figures.rate.ci95[1]) : "") },
];

/** The trailing column that holds the caution (first data line) and is empty on the others. */
export const NOTE_COLUMN = "note";

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

/**
 * The caution the file carries: statistical, how each interval method reads, not for billing,
 * how the groups were chosen (selection.ts: the winner's-curse note travels with the numbers),
 * and the question asked.
 */
export function csvCaution(answer: EstimateAnswer, tenant: string, query: string): string {
  return (
    `Weir estimates for tenant ${tenant} are statistical (priority sampling; 95% intervals: method normal = estimate ± 1.96 SE; ` +
    `gamma = Fay-Feuer gamma interval where the normal approximation would be poor, and then rough with its reason; ` +
    `no-match = no sampled record matched, and the interval is 0 up to a bound) and not exact accounting: for billing use exact counts.` +
    `${answer.selection ? ` Groups: ${answer.selection.note}` : ""}` +
    (answer.p95
      ? ` 95th percentile of ${answer.p95.windows} windows' rates (nearest rank): ${answer.p95.estimate} ${answer.p95.unit}, 95% interval ${answer.p95.ci95[0]} to ${answer.p95.ci95[1]}.`
      : "") +
    ` Query: ${query}`
  );
}

/**
 * The answer as a CSV document. `query` describes the question in one line (`describeQuery`
 * in query-state.ts); every line ends in CRLF (RFC 4180 §2, rules 1 and 2).
 */
export function estimatesCsv(answer: EstimateAnswer, tenant: string, query: string): string {
  const columns = answer.unit === "rate" ? [...CSV_COLUMNS, ...RATE_COLUMNS] : CSV_COLUMNS;
  const header = [...columns.map((c) => c.name), NOTE_COLUMN];
  const lines: CsvLine[] = [{ key: TOTAL_KEY, figures: answer, answer }, ...answer.groups.map((g) => ({ key: g.key, figures: g, answer }))];
  const caution = csvCaution(answer, tenant, query);
  const records = lines.map((line, i) => [...columns.map((c) => c.value(line)), i === 0 ? caution : ""]);
  return [header, ...records].map((fields) => `${csvRecord(fields)}\r\n`).join("");
}

/** A file name for the export, e.g. `weir-riverline-bytes-by-dst-20240501T0200Z.csv`. */
export function csvFileName(tenant: string, metric: string, groupBy: string | null, from: number): string {
  const stamp = new Date(from).toISOString().slice(0, 16).replace(/[-:]/g, "");
  return `weir-${tenant}-${metric}${groupBy ? `-by-${groupBy}` : ""}-${stamp}Z.csv`;
}
