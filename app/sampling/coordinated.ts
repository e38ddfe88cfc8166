/**
 * Coordinated priorities: the u_i of priority sampling (Duffield, Lund, Thorup,
 * "Priority sampling for estimation of arbitrary subset sums", J. ACM 54(6), 2007)
 * drawn from a keyed hash of the flow key instead of a random source, so that
 * the same flow exported by two collectors gets the same priority everywhere and
 * a merge can recognise and count it once.
 *
 * Pure module: no I/O and no node:crypto, so it runs in the browser too.
 */
import type { FlowRecord } from "../flow/record.ts";
import type { Kept, ReservoirState } from "./reservoir";
import { sipHash24 } from "./siphash";

/** Length of `flowKeyBytes`: 16 + 16 + 2 + 2 + 1 + 8. */
export const flowKeyLength = 45;

/** One fixed marker for "no start time"; no valid time can have it (times are below 2^53). */
const NO_START = 0xffffffff;

/**
 * The canonical bytes of a flow's key, the input of its coordinated draw:
 * source address (16 bytes), destination address (16), source port (2),
 * destination port (2), protocol (1), start time in epoch milliseconds (8),
 * all big-endian (network order), 45 bytes in all.
 *
 * Why these fields: the 5-tuple names the conversation, and the start time tells
 * apart successive flows of one 5-tuple (a port reused later, a new flow after an
 * idle timeout). They are what every collector that saw the flow agrees on.
 * Counters, end time, interfaces and AS numbers are left out: they describe one
 * exporter's view (its interfaces, its routing table) rather than the flow.
 * A missing start time encodes as the fixed marker ff ff ff ff ff ff ff ff, so
 * records without one still get a well-defined, reproducible key; no real time
 * encodes so, because times are non-negative safe integers (below 2^53).
 * Caveat: two records of one stream with the same key (an exporter that repeats
 * the first-packet time in each interim record of a long flow) get the same u,
 * so their priorities are not independent as DLT 2007 assumes.
 *
 * @example
 * flowKeyBytes({ src: ::ffff:192.0.2.1, dst: ::ffff:198.51.100.7, sport: 49152, dport: 443, proto: 6, start: 1_000, … })
 * // 00…00 ff ff c0 00 02 01 | 00…00 ff ff c6 33 64 07 | c0 00 | 01 bb | 06 | 00 00 00 00 00 00 03 e8
 */
export function flowKeyBytes(record: FlowRecord): Uint8Array {
  if (record.src.length !== 16 || record.dst.length !== 16) {
    throw new RangeError("flow addresses must be 16 bytes (IPv4 stored IPv4-mapped)");
  }
  const bytes = new Uint8Array(flowKeyLength);
  writeFlowKey(bytes, record.src, record.dst, record.sport, record.dport, record.proto, record.start);
  return bytes;
}

/**
 * Writes the key of `flowKeyBytes` into `out` (45 bytes) from the flow's fields, so that
 * ingest can key packed rows without building record objects.
 */
export function writeFlowKey(out: Uint8Array, src: Uint8Array, dst: Uint8Array, sport: number, dport: number, proto: number, start: number | null): void {
  const view = new DataView(out.buffer, out.byteOffset, flowKeyLength);
  out.set(src, 0);
  out.set(dst, 16);
  view.setUint16(32, sport);
  view.setUint16(34, dport);
  view.setUint8(36, proto);
  if (start === null) {
    view.setUint32(37, NO_START);
    view.setUint32(41, NO_START);
  } else {
    view.setUint32(37, Math.floor(start / 2 ** 32));
    view.setUint32(41, start % 2 ** 32);
  }
}

/**
 * A coordinated uniform draw in (0, 1] for one flow key: SipHash-2-4 under the
 * tenant's 16-byte secret (Aumasson & Bernstein, INDOCRYPT 2012), its top 53
 * bits h' mapped to u = (h' + 1) / 2^53 — every value a double holds exactly,
 * never 0, so the priority w/u stays finite. A keyed hash (a PRF) rather than a
 * plain one, so that nobody who does not hold the secret can pick flow keys that
 * land in or out of the sample.
 *
 * @example
 * const secret = Uint8Array.from({ length: 16 }, (_, i) => i);
 * coordinatedUniform(secret, flowKeyBytes(record)) // the same number in (0, 1] on every collector and in the browser
 */
export function coordinatedUniform(key: Uint8Array, flowKey: Uint8Array): number {
  if (key.length !== 16) throw new RangeError(`the coordination secret must be 16 bytes, got ${key.length}`);
  const { hi, lo } = sipHash24(key, flowKey);
  // floor(h / 2^11) = hi·2^21 + floor(lo / 2^11), below 2^53: exact in a double.
  return (hi * 2 ** 21 + (lo >>> 11) + 1) / 2 ** 53;
}

/** A merged reservoir and how many duplicate kept records the merge counted once. */
export interface CoordinatedMerge<T> {
  state: ReservoirState<T>;
  /** Kept records dropped because an input already gave the same flow with the same priority. */
  duplicatesDropped: number;
  /** Those dropped copies themselves (their counters were counted once already). */
  dropped: Kept<T>[];
}

const hex = (bytes: Uint8Array) => Array.from(bytes, (b) => b.toString(16).padStart(2, "0")).join("");

/**
 * Merges priority samples whose u_i are coordinated draws (`coordinatedUniform`)
 * over streams that may OVERLAP — the same flow exported by two collectors.
 * A kept record identical to one already taken (same flow key, same priority)
 * is counted once; then the merge rule of Duffield, Lund, Thorup (J. ACM 54(6),
 * 2007) applies as in `mergeStates`: k_m = min(k wanted, every input k), keep the
 * k_m highest distinct priorities, τ = the largest of the remaining priorities
 * and every input τ_j (that is, the (k_m+1)-th largest of them all).
 *
 * When this is valid: every input drew with the same secret, and the copies of a
 * flow are the same flow record, so they carry the same weight and hence the same
 * priority. Then each collector's stream is a sub-stream of the deduplicated
 * union, with the same priorities, and the result is exactly the reservoir one
 * sampler over the deduplicated union would have built, so subset sums keep the
 * unbiasedness of DLT 2007 Theorem 1 for that union. Two records with the same
 * key but different priorities (different weights, or different secrets) are
 * different records to this merge and both count: do not merge reservoirs drawn
 * under different secrets. Likewise copies whose start times disagree (exporter
 * clocks apart) have different keys and are not recognised as one flow.
 *
 * `seen` is the inputs' total less the duplicates found among kept records;
 * duplicates that no input kept are invisible here, so it can overcount the
 * distinct flows (it is exact while fewer than k_m distinct records were seen).
 *
 * @example
 * // Collectors A and B both exported flow f (priority 9); A also saw g (5), B saw h (7).
 * mergeCoordinated([{ k: 2, tau: 0, seen: 2, kept: [f9, g5] }, { k: 2, tau: 0, seen: 2, kept: [f9, h7] }], Infinity, (r) => flowKeyBytes(r))
 * // { state: { k: 2, tau: 5, seen: 3, kept: [f9, h7] }, duplicatesDropped: 1, dropped: [B's f9] }
 */
export function mergeCoordinated<T>(
  inputs: readonly ReservoirState<T>[],
  kWanted: number,
  flowKeyOf: (item: T) => Uint8Array,
): CoordinatedMerge<T> {
  if (inputs.length === 0) throw new RangeError("merge needs at least one reservoir");
  const k = Math.min(kWanted, ...inputs.map((r) => r.k));
  if (!Number.isInteger(k) || k < 1) throw new RangeError(`merged sample size must be a positive integer, got ${k}`);
  const taken = new Set<string>();
  const union: Kept<T>[] = [];
  const dropped: Kept<T>[] = [];
  for (const input of inputs) {
    for (const entry of input.kept) {
      // A double's shortest decimal form names it exactly, so equal strings mean equal priorities.
      const identity = `${hex(flowKeyOf(entry.item))}/${entry.priority}`;
      if (taken.has(identity)) {
        dropped.push(entry);
        continue;
      }
      taken.add(identity);
      union.push(entry);
    }
  }
  union.sort((a, b) => b.priority - a.priority);
  let tau = Math.max(0, ...inputs.map((r) => r.tau));
  if (union.length > k) tau = Math.max(tau, union[k].priority);
  return {
    state: {
      k,
      tau,
      seen: inputs.reduce((n, r) => n + r.seen, 0) - dropped.length,
      // As in merge.ts: a no-op unless an input (an hourly roll-up above the fine k) holds fewer than k_j records while τ_j > 0.
      kept: union.slice(0, k).filter((r) => r.priority > tau),
    },
    duplicatesDropped: dropped.length,
    dropped,
  };
}
