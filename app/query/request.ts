/**
 * The estimate request: what `POST /api/v1/estimate` takes as JSON and `GET /api/v1/estimate`
 * takes as a query string, validated by one zod schema for both (and later for the console's
 * Slice form). Parsing turns CIDR text into byte prefixes and port text into ranges, so the
 * scan compiles the query without parsing anything again.
 *
 * Pure module: no I/O, usable in the browser and on the server.
 */
import { z } from "zod";
import { parseRfc3339 } from "../time/rfc3339.ts";
import { FILTER_FIELDS, FILTER_NAMES, GROUP_BY, VALUE_KINDS, type GroupByKind, type NumberRange, type WhereFilters, type WhereRequest } from "./fields.ts";

export { GROUP_BY, type GroupByKind } from "./fields.ts";

/** What the estimate sums: a record's bytes, its packets, or 1 per record (flows). */
export const METRICS = ["bytes", "packets", "flows"] as const;
export type Metric = (typeof METRICS)[number];

/** Group prefix lengths when none are given: a /24 per IPv4 network, a /64 per IPv6 subnet (RFC 4291 §2.5.4). */
export const DEFAULT_PREFIX_LENGTH = { ipv4: 24, ipv6: 64 } as const;
export const DEFAULT_TOP = 10;

/**
 * How a group-by picks its top groups: `estimate` ranks on the groups' own estimates (which
 * then tend to be overstated), `split` ranks on one half of the kept records and estimates on
 * an independent other half (selection.ts).
 */
export const RANK_MODES = ["estimate", "split"] as const;
export type RankMode = (typeof RANK_MODES)[number];

/**
 * How the answer shows volumes: `total` over the range (default), or `rate`, which adds per
 * second figures beside the totals (bit/s for bytes, packets/s, flows/s) and the 95th
 * percentile of the windows' rates (rate.ts).
 */
export const UNITS = ["total", "rate"] as const;
export type Unit = (typeof UNITS)[number];
export const MAX_TOP = 1000;
/** Longest time range of one query; a year and a bit, so "the same month last year" fits. */
export const MAX_SPAN_DAYS = 400;
/** Items per list: the scan tests every kept record against every prefix of a list. */
export const MAX_LIST_ITEMS = 256;

const DAY_MS = 86_400_000;

/** An inclusive range of transport ports (fields.ts). */
export type PortRange = NumberRange;

export type GroupBy =
  | { by: "src" | "dst"; prefixLength: { ipv4: number; ipv6: number } }
  | { by: Exclude<GroupByKind, "src" | "dst"> };

/** A request as sent in JSON. A list field also takes a single value. */
export interface EstimateRequest {
  /** ISO 8601 with a timezone (or a date, read as UTC midnight), or epoch milliseconds. */
  from: string | number;
  to: string | number;
  /** Filters: the fields of fields.ts (CIDR prefixes, ports, protocols, AS numbers, interfaces, collectors). */
  where?: WhereRequest;
  metric?: Metric;
  groupBy?: GroupByKind;
  /** With groupBy src or dst: one length for both families (0–32), or one per family on its own scale. */
  prefixLength?: number | { ipv4?: number; ipv6?: number };
  top?: number;
  /** With groupBy: how the top groups are chosen; default "estimate". */
  rank?: RankMode;
  /** Count named collectors that hold the same records (a copy and its origin, a merge and an input) together anyway; default false (422). */
  allowOverlap?: boolean;
  /** "rate" adds rates per second and the windows' 95th percentile beside the totals; default "total". */
  unit?: Unit;
}

/** A validated request, ready to compile. Times are epoch ms; windows whose start lies in [from, to) are covered. */
export interface EstimateQuery {
  from: number;
  to: number;
  where: WhereFilters;
  /** null: the tenant's weight attribute. */
  metric: Metric | null;
  groupBy: GroupBy | null;
  top: number;
  rank: RankMode;
  /** Named collectors holding the same records are counted together instead of refused (collector-rule.ts). */
  allowOverlap: boolean;
  /** "rate": the answer carries rates beside the totals; absent means "total". */
  unit?: Unit;
}

/** One problem with a request: `path` names the field as the client wrote it. */
export interface QueryIssue {
  path: string;
  message: string;
}

export type ParsedQuery = { ok: true; query: EstimateQuery } | { ok: false; message: string; details: QueryIssue[] };

// ---- leaf values ---------------------------------------------------------------------------

const TIME_FORM = "RFC 3339 date-time (e.g. 2024-05-01T02:00:00Z), a date (UTC midnight) or epoch milliseconds";

/** Epoch ms of RFC 3339 text (app/time/rfc3339.ts; a bare date is UTC midnight), or a reason. */
function isoToMs(text: string): number | string {
  const ms = parseRfc3339(text, { date: true });
  if (typeof ms === "string") return ms.startsWith("must be ") ? `must be ${TIME_FORM}` : ms;
  return ms < 0 ? "is before 1970-01-01T00:00:00Z" : ms;
}

function fail(ctx: z.RefinementCtx, input: unknown, message: string, path: PropertyKey[] = []): never {
  ctx.issues.push({ code: "custom", message, input, path });
  return z.NEVER;
}

// ISO 8601 writes years with four digits, and a JavaScript Date ends at 8.64e15 ms (ECMA-262
// TimeClip): times from the year 10000 on are refused rather than crash a formatter.
const END_OF_TIME_MS = Date.UTC(10000, 0, 1);

const time = z.unknown().transform((value, ctx): number => {
  if (value === undefined || value === null) return fail(ctx, value, `is required: ${TIME_FORM}`);
  const inRange = (ms: number) => (ms < END_OF_TIME_MS ? ms : fail(ctx, value, "must be before 10000-01-01T00:00:00Z"));
  if (typeof value === "number") {
    return Number.isSafeInteger(value) && value >= 0 ? inRange(value) : fail(ctx, value, `must be ${TIME_FORM} (a non-negative whole number)`);
  }
  if (typeof value !== "string") return fail(ctx, value, `must be ${TIME_FORM}`);
  if (/^\d{1,16}$/.test(value)) return inRange(Number(value));
  const ms = isoToMs(value);
  return typeof ms === "number" ? ms : fail(ctx, value, ms);
});

/**
 * One time of a request as epoch ms, in the forms the estimate API takes (ISO 8601 with a
 * timezone, a bare date as UTC midnight, or epoch milliseconds as a number or digits), so
 * every endpoint that takes a range reads times alike.
 *
 * @example requestTimeSchema.parse("2024-05-01T02:00:00Z") // 1714528800000
 */
export const requestTimeSchema = time;

/** A list field: an array, or one bare value standing for a list of one. */
function list<T extends z.ZodType>(item: T, what: string) {
  return z.preprocess(
    (value) => (value === null ? undefined : typeof value === "string" || typeof value === "number" ? [value] : value),
    z
      .array(item, { error: `must be a list of ${what}` })
      .max(MAX_LIST_ITEMS, { error: `lists at most ${MAX_LIST_ITEMS} items; use shorter prefixes or port ranges to cover more` })
      .default([]),
  );
}

const PREFIX_LENGTH_FORM =
  'must be a prefix length 0–32 for both families, or { "ipv4": 0–32, "ipv6": 0–128 } (in a query string prefixLength=24 or prefixLength=ipv4:24,ipv6:48)';

function lengthUpTo(value: unknown, max: number): value is number {
  return typeof value === "number" && Number.isInteger(value) && value >= 0 && value <= max;
}

const prefixLengthSchema = z.unknown().transform((value, ctx): number | { ipv4?: number; ipv6?: number } => {
  if (lengthUpTo(value, 32)) return value;
  if (lengthUpTo(value, 128)) {
    return fail(
      ctx,
      value,
      `${value} is longer than an IPv4 address (32 bits); to group IPv6 by /${value} send { "ipv4": 24, "ipv6": ${value} } (in a query string prefixLength=ipv4:24,ipv6:${value})`,
    );
  }
  if (typeof value !== "object" || value === null || Array.isArray(value)) return fail(ctx, value, PREFIX_LENGTH_FORM);
  const given = value as Record<string, unknown>;
  const unknown = Object.keys(given).filter((key) => key !== "ipv4" && key !== "ipv6");
  if (unknown.length > 0) return fail(ctx, value, `${PREFIX_LENGTH_FORM}; ${unknown.join(", ")} is not a family`);
  // Each family counts on its own scale (RFC 4632 for IPv4, RFC 4291 §2.3 for IPv6).
  if (given.ipv4 !== undefined && !lengthUpTo(given.ipv4, 32)) return fail(ctx, value, "must be a prefix length from 0 to 32", ["ipv4"]);
  if (given.ipv6 !== undefined && !lengthUpTo(given.ipv6, 128)) return fail(ctx, value, "must be a prefix length from 0 to 128", ["ipv6"]);
  return { ipv4: given.ipv4 as number | undefined, ipv6: given.ipv6 as number | undefined };
});

// ---- the request -------------------------------------------------------------------------

// Every filter of the table, each a list of its kind's items.
const whereSchema = z.strictObject(
  Object.fromEntries(FILTER_FIELDS.map((f) => [f.name, list(VALUE_KINDS[f.value].item, VALUE_KINDS[f.value].items)])),
  { error: `must be an object of filters (${FILTER_NAMES.join(", ")})` },
);

const WHERE_FIELDS: readonly string[] = FILTER_NAMES;

const requestObject = z.strictObject(
  {
    from: time,
    to: time,
    where: whereSchema.optional(),
    metric: z.enum(METRICS, { error: `must be one of ${METRICS.join(", ")}` }).optional(),
    groupBy: z.enum(GROUP_BY, { error: `must be one of ${GROUP_BY.join(", ")}` }).optional(),
    prefixLength: prefixLengthSchema.optional(),
    top: z
      .int({ error: `must be a whole number from 1 to ${MAX_TOP}` })
      .min(1, { error: `must be a whole number from 1 to ${MAX_TOP}` })
      .max(MAX_TOP, { error: `must be a whole number from 1 to ${MAX_TOP}` })
      .optional(),
    rank: z.enum(RANK_MODES, { error: `must be one of ${RANK_MODES.join(", ")} (split: rank on one half of the kept records, estimate on the other)` }).optional(),
    allowOverlap: z.boolean({ error: "must be true or false (true counts named collectors that hold the same records together anyway)" }).optional(),
    unit: z.enum(UNITS, { error: `must be one of ${UNITS.join(", ")} (rate: bit/s, packets/s or flows/s beside the totals)` }).optional(),
  },
  { error: "the request must be a JSON object with from, to and optional where, metric, groupBy, prefixLength, top, rank, allowOverlap, unit" },
);

const REQUEST_FIELDS = Object.keys(requestObject.shape);

/** The JSON request schema; its output is an `EstimateQuery`. */
export const estimateRequestSchema = requestObject
  .superRefine((q, ctx) => {
    if (q.to <= q.from) {
      ctx.addIssue({ code: "custom", path: ["to"], message: `must be after from (${new Date(q.from).toISOString()})` });
    } else if (q.to - q.from > MAX_SPAN_DAYS * DAY_MS) {
      const days = Math.ceil((q.to - q.from) / DAY_MS);
      ctx.addIssue({
        code: "custom",
        path: ["to"],
        message: `the range spans ${days} days; one query covers at most ${MAX_SPAN_DAYS} days, so split it into several`,
      });
    }
    if (q.prefixLength !== undefined && q.groupBy !== "src" && q.groupBy !== "dst") {
      ctx.addIssue({ code: "custom", path: ["prefixLength"], message: "applies only with groupBy src or dst" });
    }
    if (q.rank !== undefined && q.groupBy === undefined) {
      ctx.addIssue({ code: "custom", path: ["rank"], message: "applies only with groupBy: it says how the top groups are chosen" });
    }
  })
  .transform((q): EstimateQuery => {
    const where = (q.where ?? whereSchema.parse({})) as WhereFilters;
    let groupBy: GroupBy | null = null;
    if (q.groupBy === "src" || q.groupBy === "dst") {
      const given = q.prefixLength;
      const prefixLength =
        typeof given === "number"
          ? { ipv4: given, ipv6: given }
          : { ipv4: given?.ipv4 ?? DEFAULT_PREFIX_LENGTH.ipv4, ipv6: given?.ipv6 ?? DEFAULT_PREFIX_LENGTH.ipv6 };
      groupBy = { by: q.groupBy, prefixLength };
    } else if (q.groupBy !== undefined) {
      groupBy = { by: q.groupBy };
    }
    return { from: q.from, to: q.to, where, metric: q.metric ?? null, groupBy, top: q.top ?? DEFAULT_TOP, rank: q.rank ?? "estimate", allowOverlap: q.allowOverlap ?? false, unit: q.unit ?? "total" };
  });

// ---- issues --------------------------------------------------------------------------------

type Source = "json" | "query";

function formatPath(path: readonly PropertyKey[], source: Source): string {
  // In a query string the filters stand at the top level, so name them as the client wrote them.
  const segments = source === "query" && path[0] === "where" ? path.slice(1) : path;
  let text = "";
  for (const segment of segments) {
    if (typeof segment === "number") text += `[${segment}]`;
    else text += text === "" ? String(segment) : `.${String(segment)}`;
  }
  return text;
}

function unknownKeyMessage(key: string, parent: readonly PropertyKey[], source: Source): string {
  if (source === "json" && parent.length === 0 && WHERE_FIELDS.includes(key)) {
    return `is a filter: put it inside "where", e.g. { "where": { "${key}": … } }`;
  }
  if (parent[0] === "where") return `is not a known filter (known: ${WHERE_FIELDS.join(", ")})`;
  const known = source === "query" ? [...QUERY_SCALARS, ...WHERE_FIELDS] : REQUEST_FIELDS;
  return `is not a known ${source === "query" ? "parameter" : "field"} (known: ${known.join(", ")})`;
}

function toIssues(error: z.ZodError, source: Source): QueryIssue[] {
  const out: QueryIssue[] = [];
  for (const issue of error.issues) {
    if (issue.code === "unrecognized_keys") {
      for (const key of issue.keys) {
        const shown = key.length > 64 ? `${key.slice(0, 64)}…` : key;
        out.push({ path: formatPath([...issue.path, shown], source), message: unknownKeyMessage(key, issue.path, source) });
      }
      continue;
    }
    out.push({ path: formatPath(issue.path, source), message: issue.message });
  }
  return out;
}

function result(parsed: ReturnType<typeof estimateRequestSchema.safeParse>, source: Source, extra: QueryIssue[] = []): ParsedQuery {
  if (parsed.success && extra.length === 0) return { ok: true, query: parsed.data };
  const details = [...extra, ...(parsed.success ? [] : toIssues(parsed.error, source))];
  const first = details[0];
  const more = details.length > 1 ? ` (and ${details.length - 1} more)` : "";
  const end = more === "" && /[.?!]$/.test(first.message) ? "" : ".";
  const message = `Invalid query: ${first.path === "" ? "" : `${first.path}: `}${first.message}${more}${end}`;
  return { ok: false, message, details };
}

/**
 * Validates a JSON request body.
 *
 * @example parseEstimateRequest({ from: "2024-05-01T02:00:00Z", to: "2024-05-01T02:40:00Z", where: { src: ["198.51.100.0/25"], dport: [443] } })
 *   // { ok: true, query: { from: 1714528800000, to: 1714531200000, where: { src: [198.51.100.0/25], dport: [{ low: 443, high: 443 }], … }, metric: null, groupBy: null, top: 10 } }
 * @example parseEstimateRequest({ from: 0, to: 1, where: { src: "198.51.100.7/24" } })
 *   // { ok: false, details: [{ path: "where.src[0]", message: "198.51.100.7/24 has host bits set; did you mean 198.51.100.0/24?" }], … }
 */
export function parseEstimateRequest(body: unknown): ParsedQuery {
  return result(estimateRequestSchema.safeParse(body), "json");
}

// ---- the query-string form ------------------------------------------------------------------

const QUERY_SCALARS = ["from", "to", "metric", "groupBy", "prefixLength", "top", "rank", "allowOverlap", "unit"] as const;
/** Filters whose items a query string hands on as numbers (protocols take numbers only). */
const NUMERIC_LISTS = new Set<string>(FILTER_FIELDS.filter((f) => VALUE_KINDS[f.value].numbers).map((f) => f.name));

function digitsToNumber(text: string): string | number {
  return /^\d{1,16}$/.test(text) ? Number(text) : text;
}

/** `prefixLength=24` or `prefixLength=ipv4:24,ipv6:48`; anything else goes on as text for the schema to refuse. */
function prefixLengthFromText(text: string): unknown {
  if (/^\d{1,3}$/.test(text)) return Number(text);
  const out: Record<string, number> = {};
  for (const part of text.split(",")) {
    const m = /^\s*(ipv4|ipv6)\s*:\s*(\d{1,3})\s*$/.exec(part);
    if (!m || m[1] in out) return text;
    out[m[1]] = Number(m[2]);
  }
  return out;
}

/**
 * Validates the query-string form: the same fields, with the filters at the top level and
 * lists comma-separated or repeated (`src=198.51.100.0/24,2001:db8::/32&dport=443`).
 * Paths in the issues name the parameters as written (`src[1]`, not `where.src[1]`).
 *
 * @example parseEstimateSearchParams(new URLSearchParams("from=2024-05-01&to=2024-05-02&dport=443,8443&groupBy=src"))
 *   // { ok: true, query: { …, where: { dport: [{ low: 443, high: 443 }, { low: 8443, high: 8443 }], … }, groupBy: { by: "src", prefixLength: { ipv4: 24, ipv6: 64 } } } }
 */
export function parseEstimateSearchParams(params: URLSearchParams): ParsedQuery {
  const body: Record<string, unknown> = {};
  const where: Record<string, unknown[]> = {};
  const extra: QueryIssue[] = [];
  for (const name of new Set(params.keys())) {
    const values = params.getAll(name);
    if ((QUERY_SCALARS as readonly string[]).includes(name)) {
      if (values.length > 1 && name !== "prefixLength") {
        extra.push({ path: name, message: `is given ${values.length} times; give it once` });
      }
      const text = name === "prefixLength" ? values.join(",") : values[0];
      body[name] =
        name === "top" || name === "from" || name === "to"
          ? digitsToNumber(text)
          : name === "prefixLength"
            ? prefixLengthFromText(text)
            : name === "allowOverlap" && (text === "true" || text === "false")
              ? text === "true"
              : text;
    } else if (WHERE_FIELDS.includes(name)) {
      const items = values.flatMap((v) => v.split(",")).map((v) => v.trim());
      const empty = items.indexOf("");
      if (empty >= 0) {
        extra.push({ path: `${name}[${empty}]`, message: "is empty; separate items with single commas" });
        continue;
      }
      where[name] = NUMERIC_LISTS.has(name) ? items.map(digitsToNumber) : items;
    } else {
      extra.push({ path: name, message: unknownKeyMessage(name, [], "query") });
    }
  }
  if (Object.keys(where).length > 0) body.where = where;
  return result(estimateRequestSchema.safeParse(body), "query", extra);
}
