/**
 * The subset scan: a compiled estimate query run over the kept records of many reservoirs.
 *
 * Each kept record that matches the filter adds its Horvitz–Thompson term x/p, with
 * p = min(1, w/τ) and τ its own reservoir's threshold (Duffield, Lund, Thorup, "Priority
 * sampling for estimation of arbitrary subset sums", J. ACM 54(6), 2007, §5), to the total
 * and to its group. Reservoirs are independent samples (collectors, windows, nodes), so the
 * total is the sum of per-reservoir sums.
 *
 * The query is compiled once into lookup tables and address masks, and the loop over the
 * typed-array columns allocates nothing per record: a day of 5-minute windows at k = 1024 is
 * about 300 000 kept records, scanned on every query.
 *
 * Pure module: no I/O, usable in the browser and on the server.
 */
import { isIPv4Mapped } from "../net/address.ts";
import { formatPrefix, type Prefix } from "../net/prefix.ts";
import { addRecord, addSums, EMPTY_SUM, type EstimateSum } from "../sampling/estimate.ts";
import { presenceBit, type KeptColumns } from "./columns.ts";
import {
  FILTER_FIELDS,
  groupField,
  NO_VALUE_KEY,
  SMALL_COLUMNS,
  type AddressColumn,
  type FieldColumn,
  type NumberColumn,
  type NumberRange,
  type SmallColumn,
} from "./fields.ts";
import type { EstimateQuery, Metric } from "./request.ts";

/** One reservoir's part of a scan: its threshold, where it comes from, and its kept records. */
export interface ScanReservoir {
  /** τ of the reservoir (0 while it kept every record it saw). */
  tau: number;
  /** Collector name. */
  collector: string;
  /** Window start, epoch ms. */
  windowStart: number;
  columns: KeptColumns;
}

/** A set of prefixes as 32-bit words: an address matches when (word & mask) = value for all four words. */
interface PrefixSet {
  count: number;
  masks: Int32Array;
  values: Int32Array;
}

/**
 * One filter of the query over one column, by the kind of column it reads (fields.ts): a
 * lookup table indexed by a small whole number (ports, protocol), a prefix set over an address,
 * or sorted disjoint ranges over an optional unsigned32 (AS numbers, interfaces), which a record
 * without the value never matches.
 */
export type Check =
  | { kind: "table"; column: SmallColumn; table: Uint8Array }
  | { kind: "prefix"; column: AddressColumn; set: PrefixSet; exclude: boolean }
  | { kind: "ranges"; column: NumberColumn; bit: number; lows: Float64Array; highs: Float64Array };

/** How records are grouped; 0 is no group-by (selection.ts relies on it). */
const Group = { None: 0, Prefix: 1, Small: 2, Number: 3, Collector: 4, Window: 5 } as const;
type Group = (typeof Group)[keyof typeof Group];

/** An estimate query turned into lookup tables; build it with `compileQuery`. */
export interface CompiledQuery {
  from: number;
  to: number;
  /** null: every collector. */
  collectors: ReadonlySet<string> | null;
  /** Every record filter, cheapest first. */
  checks: Check[];
  metric: Metric;
  group: Group;
  /** The column a group-by reads (the field's column in fields.ts). */
  groupColumn: FieldColumn | null;
  /** Group masks of IPv4 (mapped) and IPv6 addresses, as words. */
  groupMask4: Int32Array;
  groupMask6: Int32Array;
  groupLength4: number;
  groupLength6: number;
  top: number;
}

export interface ScanGroup {
  key: string;
  sum: EstimateSum;
}

export interface ScanResult {
  /** Over every matching kept record of every reservoir. */
  total: EstimateSum;
  /** The `top` groups by estimate, largest first; empty without a group-by. */
  groups: ScanGroup[];
}

// ---- compiling -------------------------------------------------------------------------------

/** Bytes of a mask of `length` leading one bits on the 16-byte scale, as four words. */
function maskWords(length: number): Int32Array {
  const bytes = new Uint8Array(16);
  for (let i = 0; i < 16; i++) {
    const bits = Math.min(8, Math.max(0, length - 8 * i));
    bytes[i] = (0xff00 >> bits) & 0xff;
  }
  return new Int32Array(bytes.buffer);
}

/**
 * Words of the prefixes. A prefix match (RFC 4632 §3.1) is a masked compare; four 32-bit
 * compares per prefix instead of a loop over 16 bytes, since IPv4-mapped addresses share their
 * first 12 bytes and a byte loop would walk them for every record.
 */
function prefixSet(prefixes: readonly Prefix[]): PrefixSet {
  const masks = new Int32Array(4 * prefixes.length);
  const values = new Int32Array(4 * prefixes.length);
  prefixes.forEach((p, i) => {
    masks.set(maskWords(p.length), 4 * i);
    // p.bytes has its host bits cleared (parsePrefix guarantees it), so it is the masked value.
    values.set(new Int32Array(p.bytes.slice().buffer), 4 * i);
  });
  return { count: prefixes.length, masks, values };
}

/** 1 at every value a list of ranges (ports) or numbers (protocols) keeps. */
function lookupTable(items: readonly (NumberRange | number)[], size: number): Uint8Array {
  const table = new Uint8Array(size);
  for (const item of items) {
    if (typeof item === "number") table[item] = 1;
    else table.fill(1, item.low, item.high + 1);
  }
  return table;
}

/** Ranges sorted and merged where they overlap or touch, for a binary search. */
function mergedRanges(ranges: readonly NumberRange[]): { lows: Float64Array; highs: Float64Array } {
  const sorted = [...ranges].sort((a, b) => a.low - b.low);
  const lows: number[] = [];
  const highs: number[] = [];
  for (const { low, high } of sorted) {
    const last = highs.length - 1;
    if (last >= 0 && low <= highs[last] + 1) highs[last] = Math.max(highs[last], high);
    else {
      lows.push(low);
      highs.push(high);
    }
  }
  return { lows: Float64Array.from(lows), highs: Float64Array.from(highs) };
}

function isSmall(column: FieldColumn): column is SmallColumn {
  return column in SMALL_COLUMNS;
}

const CHECK_ORDER = { table: 0, ranges: 1, prefix: 2 } as const;

/** The record filters of a query, one per non-empty list of fields.ts (the collector list is per reservoir). */
function compileChecks(where: EstimateQuery["where"]): Check[] {
  const checks: Check[] = [];
  for (const field of FILTER_FIELDS) {
    const items = where[field.name] as readonly unknown[];
    if (items.length === 0) continue;
    const column = field.column as FieldColumn;
    if (column === "src" || column === "dst") {
      checks.push({ kind: "prefix", column, set: prefixSet(items as Prefix[]), exclude: "exclude" in field && field.exclude === true });
    } else if (isSmall(column)) {
      checks.push({ kind: "table", column, table: lookupTable(items as (NumberRange | number)[], SMALL_COLUMNS[column]) });
    } else if (column !== "collector" && column !== "window") {
      checks.push({ kind: "ranges", column, bit: presenceBit(column), ...mergedRanges(items as NumberRange[]) });
    }
  }
  // Cheap checks first: a lookup rejects most records with one load.
  return checks.sort((a, b) => CHECK_ORDER[a.kind] - CHECK_ORDER[b.kind]);
}

function groupOf(column: FieldColumn): Group {
  if (column === "src" || column === "dst") return Group.Prefix;
  if (column === "collector") return Group.Collector;
  if (column === "window") return Group.Window;
  return isSmall(column) ? Group.Small : Group.Number;
}

/** IPv4-mapped addresses are 96 bits of ::ffff:0:0/96 followed by the IPv4 address (RFC 4291 §2.5.5.2). */
const MAPPED_BITS = 96;

/**
 * Compiles a validated query for `scan`. `metric` is the query's metric, or the tenant's
 * weight attribute when the query names none.
 *
 * @example compileQuery(parsed.query, "bytes") // { checks: [{ kind: "table", column: "dport", … }, { kind: "prefix", column: "src", … }], group: …, top: 10, … }
 */
export function compileQuery(query: EstimateQuery, metric: Metric): CompiledQuery {
  const { where, groupBy } = query;
  const lengths = groupBy !== null && "prefixLength" in groupBy ? groupBy.prefixLength : { ipv4: 32, ipv6: 128 };
  const groupColumn = groupBy === null ? null : (groupField(groupBy.by).column as FieldColumn);
  return {
    from: query.from,
    to: query.to,
    collectors: where.collectors.length > 0 ? new Set(where.collectors) : null,
    checks: compileChecks(where),
    metric,
    group: groupColumn === null ? Group.None : groupOf(groupColumn),
    groupColumn,
    groupMask4: maskWords(MAPPED_BITS + lengths.ipv4),
    groupMask6: maskWords(lengths.ipv6),
    groupLength4: lengths.ipv4,
    groupLength6: lengths.ipv6,
    top: query.top,
  };
}

// ---- group keys -----------------------------------------------------------------------------

/**
 * Group ids of 128-bit keys (masked addresses), by open addressing with linear probing, so
 * looking up a record's group allocates nothing.
 */
class WordKeyTable {
  /** Four words per group id. */
  words = new Int32Array(4 * 64);
  size = 0;
  private slots = new Int32Array(256).fill(-1);

  idOf(a: number, b: number, c: number, d: number): number {
    const slots = this.slots;
    const mask = slots.length - 1;
    let h = hashWords(a, b, c, d) & mask;
    for (;;) {
      const id = slots[h];
      if (id < 0) return this.insert(h, a, b, c, d);
      const o = 4 * id;
      const w = this.words;
      if (w[o] === a && w[o + 1] === b && w[o + 2] === c && w[o + 3] === d) return id;
      h = (h + 1) & mask;
    }
  }

  private insert(slot: number, a: number, b: number, c: number, d: number): number {
    const id = this.size++;
    if (4 * this.size > this.words.length) {
      const grown = new Int32Array(2 * this.words.length);
      grown.set(this.words);
      this.words = grown;
    }
    this.words.set([a, b, c, d], 4 * id);
    this.slots[slot] = id;
    // Keep the load at most one half so probes stay short.
    if (2 * this.size > this.slots.length) this.rehash();
    return id;
  }

  private rehash(): void {
    const slots = new Int32Array(2 * this.slots.length).fill(-1);
    const mask = slots.length - 1;
    const w = this.words;
    for (let id = 0; id < this.size; id++) {
      const o = 4 * id;
      let h = hashWords(w[o], w[o + 1], w[o + 2], w[o + 3]) & mask;
      while (slots[h] >= 0) h = (h + 1) & mask;
      slots[h] = id;
    }
    this.slots = slots;
  }
}

/** Mixes four words into a 32-bit hash (multiply–xorshift rounds of MurmurHash3's finalizer). */
function hashWords(a: number, b: number, c: number, d: number): number {
  let h = Math.imul(a ^ 0x9e3779b9, 0x85ebca6b);
  h = Math.imul(h ^ (h >>> 13) ^ b, 0xc2b2ae35);
  h = Math.imul(h ^ (h >>> 16) ^ c, 0x85ebca6b);
  h = Math.imul(h ^ (h >>> 13) ^ d, 0xc2b2ae35);
  return h ^ (h >>> 16);
}

/** Words of an address column. Int32Array views need a 4-byte-aligned offset, so a misaligned column is copied. */
function wordsOf(bytes: Uint8Array, records: number): Int32Array {
  const source = bytes.byteOffset % 4 === 0 ? bytes : bytes.slice();
  return new Int32Array(source.buffer, source.byteOffset, 4 * records);
}

const MAPPED_WORD2 = new Int32Array(Uint8Array.of(0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0xff, 0xff, 0, 0, 0, 0).buffer)[2];

// ---- the scan --------------------------------------------------------------------------------

function matchesAny(set: PrefixSet, words: Int32Array, o: number): boolean {
  const m = set.masks;
  const v = set.values;
  const a0 = words[o];
  const a1 = words[o + 1];
  const a2 = words[o + 2];
  const a3 = words[o + 3];
  for (let b = 0; b < 4 * set.count; b += 4) {
    if ((a0 & m[b]) === v[b] && (a1 & m[b + 1]) === v[b + 1] && (a2 & m[b + 2]) === v[b + 2] && (a3 & m[b + 3]) === v[b + 3]) {
      return true;
    }
  }
  return false;
}

function inRanges(value: number, lows: Float64Array, highs: Float64Array): boolean {
  let lo = 0;
  let hi = lows.length - 1;
  while (lo <= hi) {
    const mid = (lo + hi) >> 1;
    if (value < lows[mid]) hi = mid - 1;
    else if (value > highs[mid]) lo = mid + 1;
    else return true;
  }
  return false;
}

/**
 * Writes to `out` the record indexes of `sel[0..m)` that pass one check, in order, and returns
 * how many (`out` may be `sel` itself). One tight loop per kind of check, so each stays monomorphic.
 */
function narrow(check: Check, c: KeptColumns, words: { src: Int32Array; dst: Int32Array }, sel: Int32Array, m: number, out: Int32Array): number {
  let kept = 0;
  switch (check.kind) {
    case "table": {
      const column = c[check.column];
      const table = check.table;
      for (let j = 0; j < m; j++) {
        const i = sel[j];
        if (table[column[i]] !== 0) out[kept++] = i;
      }
      return kept;
    }
    case "ranges": {
      const column = c.numbers[check.column];
      const { bit, lows, highs } = check;
      const present = c.present;
      for (let j = 0; j < m; j++) {
        const i = sel[j];
        if ((present[i] & bit) !== 0 && inRanges(column[i], lows, highs)) out[kept++] = i;
      }
      return kept;
    }
    case "prefix": {
      const a = words[check.column];
      const { set, exclude } = check;
      for (let j = 0; j < m; j++) {
        const i = sel[j];
        if (matchesAny(set, a, 4 * i) !== exclude) out[kept++] = i;
      }
      return kept;
    }
  }
}

/**
 * Runs a compiled query over reservoirs: reservoirs outside the query's windows or
 * collectors are skipped; every matching kept record adds `addRecord(sum, τ, w, x)` with
 * x its bytes, its packets or 1 (flows). Groups come back largest estimate first (ties in
 * key order), at most `query.top` of them.
 *
 * @example
 * scan([{ tau: 1000, collector: "edge-1", windowStart: 0, columns }], compileQuery(query, "bytes"))
 * // { total: { estimate: 6000, variance: 700000, certain: 5000, kept: 2, uncertain: 1 }, groups: [] }
 */
export function scan(reservoirs: readonly ScanReservoir[], q: CompiledQuery): ScanResult {
  let total: EstimateSum = { ...EMPTY_SUM };
  const part: EstimateSum = { ...EMPTY_SUM };
  const sums: EstimateSum[] = [];
  const words = new WordKeyTable();
  const group = q.group;
  const column = q.groupColumn;
  // Group ids by port or protocol number, -1 until the group is seen.
  const byValue = new Int32Array(group === Group.Small ? SMALL_COLUMNS[column as SmallColumn] : 0).fill(-1);
  // Group ids by unsigned32 value (AS number, interface); -1 keys the records without one.
  const byNumber = new Map<number, number>();
  const byReservoirKey = new Map<string | number, number>();
  const values: (string | number)[] = [];
  const { checks, groupMask4: g4, groupMask6: g6 } = q;
  // Every record index (identity), and the indexes that passed the checks so far (selected).
  let identity = new Int32Array(0);
  let selected = new Int32Array(0);

  for (const r of reservoirs) {
    if (r.windowStart < q.from || r.windowStart >= q.to) continue;
    if (q.collectors !== null && !q.collectors.has(r.collector)) continue;
    const c = r.columns;
    const n = c.length;
    if (n === 0) continue;
    const tau = r.tau;
    const addressWords = { src: wordsOf(c.src, n), dst: wordsOf(c.dst, n) };
    if (identity.length < n) {
      identity = Int32Array.from({ length: n }, (_, i) => i);
      selected = new Int32Array(n);
    }
    let sel = identity;
    let m = n;
    if (checks.length > 0) {
      // The first check reads every index and writes the survivors; the others narrow them in place.
      m = narrow(checks[0], c, addressWords, identity, n, selected);
      sel = selected;
      for (let k = 1; k < checks.length && m > 0; k++) m = narrow(checks[k], c, addressWords, sel, m, sel);
      if (m === 0) continue;
    }

    const x = q.metric === "bytes" ? c.bytes : q.metric === "packets" ? c.packets : null;
    const groupWords = column === "src" || column === "dst" ? addressWords[column] : null;
    const smalls = group === Group.Small ? c[column as SmallColumn] : null;
    const numbers = group === Group.Number ? c.numbers[column as NumberColumn] : null;
    const bit = group === Group.Number ? presenceBit(column as NumberColumn) : 0;
    // Collector and window groups are one per reservoir, looked up at its first match so that,
    // as for every other kind, a group exists only when some kept record matched.
    const reservoirKey = group === Group.Collector ? r.collector : r.windowStart;
    let reservoirGroup = -1;
    part.estimate = part.variance = part.certain = part.kept = part.uncertain = part.maxTerm = 0;

    for (let j = 0; j < m; j++) {
      const i = sel[j];
      const w = c.weight[i];
      const value = x === null ? 1 : x[i];
      addRecord(part, tau, w, value);
      if (group === Group.None) continue;

      let id = reservoirGroup;
      if (group === Group.Collector || group === Group.Window) {
        if (id < 0) {
          id = byReservoirKey.get(reservoirKey) ?? -1;
          if (id < 0) {
            id = sums.length;
            byReservoirKey.set(reservoirKey, id);
            values.push(reservoirKey);
            sums.push({ ...EMPTY_SUM });
          }
          reservoirGroup = id;
        }
      } else if (groupWords !== null) {
        const a = groupWords;
        const o = 4 * i;
        const a0 = a[o];
        const a1 = a[o + 1];
        const a2 = a[o + 2];
        const mask = a0 === 0 && a1 === 0 && a2 === MAPPED_WORD2 ? g4 : g6;
        id = words.idOf(a0 & mask[0], a1 & mask[1], a2 & mask[2], a[o + 3] & mask[3]);
        if (id === sums.length) sums.push({ ...EMPTY_SUM });
      } else if (smalls !== null) {
        const key = smalls[i];
        id = byValue[key];
        if (id < 0) {
          id = byValue[key] = sums.length;
          values.push(key);
          sums.push({ ...EMPTY_SUM });
        }
      } else if (numbers !== null) {
        const key = (c.present[i] & bit) !== 0 ? numbers[i] : -1;
        id = byNumber.get(key) ?? -1;
        if (id < 0) {
          id = sums.length;
          byNumber.set(key, id);
          values.push(key < 0 ? NO_VALUE_KEY : key);
          sums.push({ ...EMPTY_SUM });
        }
      }
      addRecord(sums[id], tau, w, value);
    }
    total = addSums(total, part);
  }

  return { total, groups: topGroups(q, sums, values, words) };
}

// ---- ranking and keys --------------------------------------------------------------------------

function prefixOfWords(words: Int32Array, id: number, q: CompiledQuery): Prefix {
  const bytes = new Uint8Array(Int32Array.from(words.subarray(4 * id, 4 * id + 4)).buffer);
  return isIPv4Mapped(bytes)
    ? { bytes, length: MAPPED_BITS + q.groupLength4, family: 4 }
    : { bytes, length: q.groupLength6, family: 6 };
}

function compareBytes(a: Uint8Array, b: Uint8Array): number {
  for (let i = 0; i < 16; i++) if (a[i] !== b[i]) return a[i] - b[i];
  return 0;
}

function compareValues(a: string | number, b: string | number): number {
  if (typeof a === "number" && typeof b === "number") return a - b;
  return String(a) < String(b) ? -1 : String(a) > String(b) ? 1 : 0;
}

/**
 * The `top` groups by estimate, largest first; equal estimates in key order (addresses in
 * byte order, numbers numerically, names by code unit, "none" after every number) so the answer
 * does not depend on the order records were stored in.
 */
function topGroups(q: CompiledQuery, sums: EstimateSum[], values: (string | number)[], words: WordKeyTable): ScanGroup[] {
  if (q.group === Group.None) return [];
  const byPrefix = q.group === Group.Prefix;
  const ids = Array.from(sums.keys());
  const prefixes = byPrefix ? ids.map((id) => prefixOfWords(words.words, id, q)) : [];
  ids.sort((a, b) => {
    const d = sums[b].estimate - sums[a].estimate;
    if (d !== 0) return d;
    return byPrefix ? compareBytes(prefixes[a].bytes, prefixes[b].bytes) : compareValues(values[a], values[b]);
  });
  return ids.slice(0, q.top).map((id) => ({ key: groupKey(q, id, values, prefixes), sum: sums[id] }));
}

function groupKey(q: CompiledQuery, id: number, values: (string | number)[], prefixes: Prefix[]): string {
  switch (q.group) {
    case Group.Prefix:
      return formatPrefix(prefixes[id]);
    case Group.Window:
      return new Date(values[id] as number).toISOString();
    default:
      return String(values[id]);
  }
}
