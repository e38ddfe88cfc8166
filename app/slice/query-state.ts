/**
 * The Slice page's question, held in the page URL so a link shares it: URL search params ⇄
 * `SliceState`, and `SliceState` → the query string of `GET /api/v1/estimate`.
 *
 * The page's own parameters use the estimate API's names (`src`, `dport`, `groupBy`, …), so a
 * shared link reads like the API call behind it; the time range is a preset (`range=6h`,
 * resolved against the clock when the question is asked) or fixed UTC instants (`from`, `to`).
 * Values equal to their defaults stay out of the URL. Parsing never throws: a link edited by
 * hand keeps what makes sense, and `problems` says what was set aside and why.
 *
 * Pure module: no I/O, usable in the browser and on the server.
 */
import { DEFAULT_PREFIX_LENGTH, DEFAULT_TOP, GROUP_BY, MAX_TOP, METRICS, RANK_MODES, UNITS, type GroupByKind, type Metric, type RankMode, type Unit } from "../query/request.ts";
import { FILTER_FIELDS, FILTER_NAMES, type FilterName } from "../query/fields.ts";
import { checkProtocolChip } from "./chips.ts";

export const RANGE_PRESETS = {
  "1h": { label: "Last 1 h", ms: 3_600_000 },
  "6h": { label: "Last 6 h", ms: 6 * 3_600_000 },
  "24h": { label: "Last 24 h", ms: 24 * 3_600_000 },
  "7d": { label: "Last 7 days", ms: 7 * 24 * 3_600_000 },
} as const;
export type RangePreset = keyof typeof RANGE_PRESETS;
export const DEFAULT_PRESET: RangePreset = "24h";

export type SliceRange = { preset: RangePreset } | { from: number; to: number };

/** The list filters (every filter of fields.ts), in the order they appear in a URL. */
export const LIST_FIELDS: readonly FilterName[] = FILTER_NAMES;
export type ListField = FilterName;

/** Protocol names are a convenience of the form; the API takes numbers. */
const PROTOCOL_LISTS = new Set<string>(FILTER_FIELDS.filter((f) => f.value === "protocol").map((f) => f.name));

export interface SliceState {
  range: SliceRange;
  /**
   * Filter items as text, as the estimate API takes them: CIDR prefixes, ports or ranges,
   * protocol numbers, collector names. An item a person could not have added through the
   * form (a hand-edited link) is kept, so the form can point at it and the API can explain.
   */
  lists: Record<ListField, string[]>;
  /** null: the tenant's weight attribute. */
  metric: Metric | null;
  groupBy: GroupByKind | null;
  /** Group prefix lengths per family; sent only with groupBy src or dst. */
  prefixLength: { ipv4: number; ipv6: number };
  top: number;
  /** How the top groups are chosen (selection.ts); sent only with a group-by. */
  rank: RankMode;
  /** Volumes as totals over the range, or as rates (bit/s, pkt/s) with the windows' 95th percentile. */
  unit: Unit;
}

export function defaultSliceState(): SliceState {
  return {
    range: { preset: DEFAULT_PRESET },
    lists: Object.fromEntries(LIST_FIELDS.map((field) => [field, []])) as unknown as Record<ListField, string[]>,
    metric: null,
    groupBy: null,
    prefixLength: { ...DEFAULT_PREFIX_LENGTH },
    top: DEFAULT_TOP,
    rank: "estimate",
    unit: "total",
  };
}

export interface ParsedSlice {
  state: SliceState;
  /** What the URL held that was set aside, for the page to show. */
  problems: string[];
}

// RFC 3339 date-times (with a timezone, so an instant is never read in the browser's zone) or epoch ms.
const INSTANT = /^\d{4}-\d{2}-\d{2}T\d{2}:\d{2}(?::\d{2}(?:\.\d{1,3})?)?(?:Z|[+-]\d{2}:\d{2})$/i;
/** The last instant a URL may name: the end of year 9999, where ISO 8601 text stops being four-digit years. */
export const MAX_INSTANT_MS = Date.UTC(9999, 11, 31, 23, 59, 59, 999);

/** Epoch ms of an instant in a URL, or null. */
export function parseInstant(raw: string): number | null {
  // An unencoded "+" of a hand-typed offset arrives as a space (application/x-www-form-urlencoded).
  const text = raw.replace(/ (\d{2}:\d{2})$/, "+$1");
  if (/^\d{1,16}$/.test(text)) {
    const ms = Number(text);
    return ms <= MAX_INSTANT_MS ? ms : null;
  }
  if (!INSTANT.test(text)) return null;
  const ms = Date.parse(text);
  return Number.isFinite(ms) && ms >= 0 && ms <= MAX_INSTANT_MS ? ms : null;
}

/**
 * An instant as URL text: ISO 8601 in UTC, without milliseconds when they are zero.
 *
 * @example formatInstant(Date.UTC(2024, 4, 1, 2, 0)) // "2024-05-01T02:00:00Z"
 */
export function formatInstant(ms: number): string {
  return new Date(ms).toISOString().replace(".000Z", "Z");
}

function wholeNumber(text: string, min: number, max: number): number | null {
  if (!/^\d{1,4}$/.test(text)) return null;
  const n = Number(text);
  return n >= min && n <= max ? n : null;
}

function parsePrefixLength(text: string): { ipv4: number; ipv6: number } | null {
  const both = wholeNumber(text, 0, 32);
  if (both !== null) return { ipv4: both, ipv6: both };
  const out: { ipv4: number; ipv6: number } = { ...DEFAULT_PREFIX_LENGTH };
  const seen = new Set<string>();
  for (const part of text.split(",")) {
    const m = /^\s*(ipv4|ipv6)\s*:\s*(\d{1,3})\s*$/.exec(part);
    if (!m || seen.has(m[1])) return null;
    seen.add(m[1]);
    const n = wholeNumber(m[2], 0, m[1] === "ipv4" ? 32 : 128);
    if (n === null) return null;
    out[m[1] as "ipv4" | "ipv6"] = n;
  }
  return out;
}

const KNOWN = new Set<string>(["range", "from", "to", "metric", "groupBy", "prefixLength", "top", "rank", "unit", ...LIST_FIELDS]);

/**
 * The Slice question in a page URL's search params.
 *
 * @example parseSliceParams(new URLSearchParams("range=6h&src=198.51.100.0/24&groupBy=dst")).state
 *   // { range: { preset: "6h" }, lists: { src: ["198.51.100.0/24"], … }, groupBy: "dst", … }
 */
export function parseSliceParams(params: URLSearchParams): ParsedSlice {
  const state = defaultSliceState();
  const problems: string[] = [];
  const one = (name: string) => params.get(name);

  for (const name of new Set(params.keys())) {
    if (!KNOWN.has(name)) problems.push(`Ignored the unknown parameter "${name}".`);
  }

  const from = one("from");
  const to = one("to");
  const range = one("range");
  if (from !== null || to !== null) {
    const f = from === null ? null : parseInstant(from);
    const t = to === null ? null : parseInstant(to);
    if (f === null || t === null) {
      problems.push("A custom range needs both from and to, each ISO 8601 with a timezone (e.g. 2024-05-01T02:00Z) or epoch milliseconds; showing the last 24 h instead.");
    } else if (t <= f) {
      problems.push("The custom range ends before it starts; showing the last 24 h instead.");
    } else {
      state.range = { from: f, to: t };
    }
  } else if (range !== null) {
    if (range in RANGE_PRESETS) state.range = { preset: range as RangePreset };
    else problems.push(`range=${range} is not one of ${Object.keys(RANGE_PRESETS).join(", ")}; showing the last 24 h instead.`);
  }

  for (const field of LIST_FIELDS) {
    const items = params
      .getAll(field)
      .flatMap((v) => v.split(","))
      .map((v) => v.trim())
      .filter((v) => v !== "");
    const values = PROTOCOL_LISTS.has(field) ? items.map((v) => {
      const checked = checkProtocolChip(v);
      return checked.ok ? checked.value : v;
    }) : items;
    state.lists[field] = [...new Set(values)];
  }

  const metric = one("metric");
  if (metric !== null) {
    if ((METRICS as readonly string[]).includes(metric)) state.metric = metric as Metric;
    else problems.push(`metric=${metric} is not one of ${METRICS.join(", ")}; using the tenant's weight attribute.`);
  }
  const groupBy = one("groupBy");
  if (groupBy !== null) {
    if ((GROUP_BY as readonly string[]).includes(groupBy)) state.groupBy = groupBy as GroupByKind;
    else problems.push(`groupBy=${groupBy} is not one of ${GROUP_BY.join(", ")}; not grouping.`);
  }
  const prefixLength = params.getAll("prefixLength").join(",");
  if (prefixLength !== "") {
    const parsed = parsePrefixLength(prefixLength);
    if (parsed) state.prefixLength = parsed;
    else problems.push(`prefixLength=${prefixLength} is not 0–32 or ipv4:0–32,ipv6:0–128; using /${DEFAULT_PREFIX_LENGTH.ipv4} and /${DEFAULT_PREFIX_LENGTH.ipv6}.`);
  }
  const top = one("top");
  if (top !== null) {
    const n = wholeNumber(top, 1, MAX_TOP);
    if (n !== null) state.top = n;
    else problems.push(`top=${top} is not a whole number from 1 to ${MAX_TOP}; using ${DEFAULT_TOP}.`);
  }
  const rank = one("rank");
  if (rank !== null) {
    if ((RANK_MODES as readonly string[]).includes(rank)) state.rank = rank as RankMode;
    else problems.push(`rank=${rank} is not one of ${RANK_MODES.join(", ")}; ranking on the estimates.`);
  }
  const unit = one("unit");
  if (unit !== null) {
    if ((UNITS as readonly string[]).includes(unit)) state.unit = unit as Unit;
    else problems.push(`unit=${unit} is not one of ${UNITS.join(", ")}; showing totals.`);
  }
  return { state, problems };
}

function prefixLengthText(p: { ipv4: number; ipv6: number }): string {
  return `ipv4:${p.ipv4},ipv6:${p.ipv6}`;
}

/**
 * The search params of a page URL holding the question; defaults are left out, lists are
 * comma-separated, the order is fixed so equal questions give equal links.
 *
 * @example sliceParams({ ...defaultSliceState(), range: { preset: "6h" }, groupBy: "dst" }).toString() // "range=6h&groupBy=dst"
 */
export function sliceParams(state: SliceState): URLSearchParams {
  const out = new URLSearchParams();
  if ("preset" in state.range) {
    if (state.range.preset !== DEFAULT_PRESET) out.set("range", state.range.preset);
  } else {
    out.set("from", formatInstant(state.range.from));
    out.set("to", formatInstant(state.range.to));
  }
  for (const field of LIST_FIELDS) {
    if (state.lists[field].length > 0) out.set(field, state.lists[field].join(","));
  }
  if (state.metric !== null) out.set("metric", state.metric);
  if (state.groupBy !== null) out.set("groupBy", state.groupBy);
  if (state.prefixLength.ipv4 !== DEFAULT_PREFIX_LENGTH.ipv4 || state.prefixLength.ipv6 !== DEFAULT_PREFIX_LENGTH.ipv6) {
    out.set("prefixLength", prefixLengthText(state.prefixLength));
  }
  if (state.top !== DEFAULT_TOP) out.set("top", String(state.top));
  if (state.rank !== "estimate") out.set("rank", state.rank);
  if (state.unit !== "total") out.set("unit", state.unit);
  return out;
}

/**
 * The page's query string, easy to read and share: `/`, `:` and `,` stay as they are, which
 * RFC 3986 §3.4 allows in a query and form decoding reads back unchanged.
 *
 * @example sliceSearch({ ...defaultSliceState(), lists: { ...defaultSliceState().lists, src: ["198.51.100.0/24", "2001:db8::/32"] } })
 *   // "?src=198.51.100.0/24,2001:db8::/32"
 */
export function sliceSearch(state: SliceState): string {
  const text = sliceParams(state)
    .toString()
    .replace(/%2F/gi, "/")
    .replace(/%3A/gi, ":")
    .replace(/%2C/gi, ",");
  return text === "" ? "" : `?${text}`;
}

const MINUTE_MS = 60_000;

/**
 * The [from, to) instants a range covers at `now`. A preset ends at the next whole minute,
 * so it includes the open window and names the same instants for a minute (one cache key,
 * one request), and starts its length before that.
 *
 * @example resolveRange({ preset: "1h" }, Date.UTC(2024, 4, 1, 2, 0, 30)) // { from: 01:01:00Z, to: 02:01:00Z } in ms
 */
export function resolveRange(range: SliceRange, now: number): { from: number; to: number } {
  if (!("preset" in range)) return { from: range.from, to: range.to };
  const to = Math.floor(now / MINUTE_MS) * MINUTE_MS + MINUTE_MS;
  return { from: Math.max(0, to - RANGE_PRESETS[range.preset].ms), to };
}

/**
 * The query string of `GET /api/v1/estimate` for the question, with the console session's
 * `tenant`. `override` swaps the grouping, as the time-series call does (groupBy=window).
 *
 * @example estimateSearch({ ...defaultSliceState(), range: { from: 0, to: 3600000 } }, "riverline", 0).toString()
 *   // "tenant=riverline&from=1970-01-01T00%3A00%3A00Z&to=1970-01-01T01%3A00%3A00Z&top=10"
 */
export function estimateSearch(
  state: SliceState,
  tenant: string,
  now: number,
  override: { groupBy?: GroupByKind | null; top?: number } = {},
): URLSearchParams {
  const { from, to } = resolveRange(state.range, now);
  const out = new URLSearchParams({ tenant, from: formatInstant(from), to: formatInstant(to) });
  for (const field of LIST_FIELDS) {
    if (state.lists[field].length > 0) out.set(field, state.lists[field].join(","));
  }
  if (state.metric !== null) out.set("metric", state.metric);
  const groupBy = override.groupBy === undefined ? state.groupBy : override.groupBy;
  if (groupBy !== null) out.set("groupBy", groupBy);
  if (groupBy === "src" || groupBy === "dst") out.set("prefixLength", prefixLengthText(state.prefixLength));
  out.set("top", String(override.top ?? state.top));
  // The split ranking is for the page's own groups, not for an override such as the time series.
  if (groupBy !== null && override.groupBy === undefined && state.rank !== "estimate") out.set("rank", state.rank);
  if (state.unit === "rate") out.set("unit", "rate");
  return out;
}

/**
 * The question in one line of plain words and `name=value` pairs, without commas or quotes
 * (the CSV export puts it in its note, which stays readable even where a tool splits at commas).
 *
 * @example describeQuery({ ...defaultSliceState(), lists: { ...defaultSliceState().lists, src: ["198.51.100.0/24", "2001:db8::/32"] } }, 0, 3600000, "bytes")
 *   // "from=1970-01-01T00:00:00Z; to=1970-01-01T01:00:00Z; metric=bytes; src=198.51.100.0/24 2001:db8::/32; top=10"
 */
export function describeQuery(state: SliceState, from: number, to: number, metric: Metric): string {
  const clean = (text: string) => text.replace(/[,"\r\n;]+/g, " ").trim();
  const parts = [`from=${formatInstant(from)}`, `to=${formatInstant(to)}`, `metric=${metric}`];
  for (const field of LIST_FIELDS) {
    if (state.lists[field].length > 0) parts.push(`${field}=${state.lists[field].map(clean).join(" ")}`);
  }
  if (state.groupBy !== null) parts.push(`groupBy=${state.groupBy}`);
  if (state.groupBy === "src" || state.groupBy === "dst") parts.push(`prefixLength=ipv4:${state.prefixLength.ipv4} ipv6:${state.prefixLength.ipv6}`);
  parts.push(`top=${state.top}`);
  if (state.groupBy !== null && state.rank !== "estimate") parts.push(`rank=${state.rank}`);
  if (state.unit === "rate") parts.push("unit=rate");
  return parts.join("; ");
}
