/**
 * Ranking the groups of a group-by, and what that ranking does to the numbers.
 *
 * The plain ranking ("estimate") sorts the groups by their own estimates and returns the top
 * N. The groups that come out on top are, on average, those whose sampling error happened to
 * push them up: their estimates are biased upward after selection (the winner's curse), and
 * the true top N may differ. The answer says so (`selection.note`).
 *
 * The corrected ranking ("split") ranks on one half of the kept records and reports, for the
 * groups chosen, estimates from the other half alone. The halves must be independent, or the
 * choice made on A leaks into B: a plain coin per kept record makes them complementary (a
 * record in A is missing from B), which for records near or above τ biases B downward after
 * selection (measured with the simulation of tests/query/selection.test.ts, seed 11, 3000
 * trials: −5.4% of the truth for the first-ranked group, ten Monte Carlo standard errors from 0).
 * Instead, each half is an independent Horvitz–Thompson sample of its own:
 *
 *   - a certain kept record (w ≥ τ, p = 1) carries no sampling error and stands in both;
 *   - an uncertain kept record (p = w/τ < 1) has a = 1 − √(1 − p), and joins both halves with
 *     probability a²/p, A only or B only with probability a(1 − a)/p each.
 *
 * With the record kept with probability p, it is then in A with probability a, in B with
 * probability a, and in both with a² = a·a: its A and B memberships are independent
 * Bernoulli(a) (derived here; the same idea as the Poisson "data thinning" of Neufeld,
 * Dharamshi, Gao, Witten, JMLR 25, 2024, where a Poisson count splits into independent
 * halves). Under threshold sampling at τ (how Duffield, Lund, Thorup, J. ACM 54(6), 2007, §5,
 * condition priority sampling) records are independent, so half A and half B are independent
 * samples and the choice made on A says nothing about B. Each half is Horvitz–Thompson with
 * inclusion probability a (Horvitz and Thompson, JASA 47, 1952): term x/a, variance estimate
 * x²(1 − a)/a² — the scan's own formulas once the record's weight is set to a·τ, so the scan
 * runs on a half unchanged. Given the sample, E[1{i∈B}·x/a] = (a/p)·x/a = x/p, the usual
 * term, so half B's estimate is unbiased given the sample and hence for the truth; its
 * variance is the priority-sampling variance plus the split's own, E[Σ x²(1/(a·p) − 1/p²)],
 * and x²(1 − a)/a² over half B estimates that sum without bias. For small p, a ≈ p/2: the
 * half-sample with estimates scaled by 2. The remaining coupling (one τ per reservoir) is
 * measured, not assumed away.
 *
 * A record's draw is 53 bits of SipHash-2-4 (Aumasson and Bernstein, INDOCRYPT 2012) under a
 * public, fixed salt, of the record's stored fields and its occurrence among identical records
 * of its reservoir: the same query gives the same answer whatever order the records were
 * stored in. It does not depend on the priority: the priority's draw u comes from a separate
 * random source, or with coordinated priorities from SipHash under the tenant's own secret
 * key, and outputs of a pseudo-random function under unrelated keys behave as independent.
 *
 * Pure module: no I/O, usable in the browser and on the server.
 */
import { sipHash24 } from "../sampling/siphash.ts";
import { bonferroniZ } from "../sampling/normal-quantile.ts";
import { copyRecord, emptyColumns, type KeptColumns } from "./columns.ts";
import { scan, type CompiledQuery, type ScanGroup, type ScanReservoir, type ScanResult } from "./scan.ts";
import { EMPTY_SUM } from "../sampling/estimate.ts";
import type { RankMode } from "./request.ts";


/** What the answer says about how its groups were chosen. */
export interface SelectionJson {
  rankedBy: RankMode;
  /** Groups with at least one kept record in the subset: the candidates the top N was chosen from. */
  groupsRanked: number;
  /** With `split`: which half ranked and which half gave the numbers shown. */
  halves?: { rankedOn: "A"; estimatedOn: "B"; onlyA: number; onlyB: number; uncertainInBoth: number; certainInBoth: number };
  /** Bonferroni z used for every group's `ci95Simultaneous`: Φ⁻¹(1 − 0.025/groupsRanked). */
  simultaneousZ: number;
  note: string;
}

export interface RankedResult extends ScanResult {
  selection: SelectionJson | null;
}

/** Fixed and public: it only has to be unrelated to anything that decides a priority. */
const SPLIT_SALT = new TextEncoder().encode("weir:rank-split1");

// The draw's message: 16 src · 16 dst · 2 sport · 2 dport · 1 proto · 8 bytes · 8 packets · 8 start · 8 weight · 4 occurrence.
const MESSAGE_BYTES = 73;
const message = new Uint8Array(MESSAGE_BYTES);
const messageView = new DataView(message.buffer);

function writeRecord(c: KeptColumns, i: number): void {
  for (let b = 0; b < 16; b++) {
    message[b] = c.src[16 * i + b];
    message[16 + b] = c.dst[16 * i + b];
  }
  messageView.setUint16(32, c.sport[i], true);
  messageView.setUint16(34, c.dport[i], true);
  message[36] = c.proto[i];
  messageView.setFloat64(37, c.bytes[i], true);
  messageView.setFloat64(45, c.packets[i], true);
  messageView.setFloat64(53, c.start[i], true);
  messageView.setFloat64(61, c.weight[i], true);
}

/**
 * A uniform draw in [0, 1) for every kept record of one reservoir: 53 bits of SipHash of the
 * record's fields and of how many identical records came before it (identical records are
 * interchangeable, so the answer does not depend on their order).
 *
 * @example splitDraws(columns) // Float64Array [0.731…, 0.052…, …]
 */
export function splitDraws(c: KeptColumns): Float64Array {
  const draws = new Float64Array(c.length);
  const seen = new Map<number, number>();
  for (let i = 0; i < c.length; i++) {
    writeRecord(c, i);
    messageView.setUint32(69, 0, true);
    let h = sipHash24(SPLIT_SALT, message);
    const id = (h.hi >>> 11) * 4294967296 + h.lo;
    const occurrence = seen.get(id) ?? 0;
    seen.set(id, occurrence + 1);
    // A repeat of an identical record hashes its occurrence too, so it gets a draw of its own.
    if (occurrence > 0) {
      messageView.setUint32(69, occurrence, true);
      h = sipHash24(SPLIT_SALT, message);
    }
    draws[i] = ((h.hi >>> 11) * 4294967296 + h.lo) / 9007199254740992;
  }
  return draws;
}

/**
 * a = 1 − √(1 − p): the inclusion probability of each half, so that two independent halves
 * each of probability a are together included with probability 1 − (1 − a)² = p. Written as
 * p/(1 + √(1 − p)) so that a small p keeps its digits.
 *
 * @example halfProbability(0.75) // 0.5
 */
export function halfProbability(p: number): number {
  return p >= 1 ? 1 : p / (1 + Math.sqrt(1 - p));
}

function pick(c: KeptColumns, indices: readonly number[], weights: readonly number[]): KeptColumns {
  const out = emptyColumns(indices.length);
  indices.forEach((i, j) => {
    out.weight[j] = weights[j];
    copyRecord(c, i, out, j);
  });
  return out;
}

export interface SplitHalves {
  a: ScanReservoir[];
  b: ScanReservoir[];
  /** Uncertain kept records in half A only, in half B only, and in both. */
  onlyA: number;
  onlyB: number;
  uncertainInBoth: number;
  /** Certain kept records (w ≥ τ): in both halves, as they are. */
  certainInBoth: number;
}

/**
 * Splits every reservoir's kept records into halves A and B (see the module note): a certain
 * record (w ≥ τ) is in both as it is; an uncertain one with p = w/τ and a = 1 − √(1 − p) is in
 * both with probability a²/p, in A only or in B only with probability a(1 − a)/p each, by its
 * draw, and stands in a half with weight a·τ, so the scan's p = w/τ becomes a. `draws` is for
 * tests that inject their own uniforms; by default `splitDraws`.
 *
 * @example splitHalves([{ tau: 1000, collector: "edge-1", windowStart: 0, columns }]) // { a: [...], b: [...], onlyA: 3, onlyB: 4, uncertainInBoth: 1, certainInBoth: 2 }
 */
export function splitHalves(reservoirs: readonly ScanReservoir[], draws: (c: KeptColumns) => Float64Array = splitDraws): SplitHalves {
  const out: SplitHalves = { a: [], b: [], onlyA: 0, onlyB: 0, uncertainInBoth: 0, certainInBoth: 0 };
  for (const r of reservoirs) {
    const c = r.columns;
    const v = draws(c);
    const inA: number[] = [];
    const inB: number[] = [];
    const weightA: number[] = [];
    const weightB: number[] = [];
    for (let i = 0; i < c.length; i++) {
      const w = c.weight[i];
      if (r.tau <= w) {
        inA.push(i);
        inB.push(i);
        weightA.push(w);
        weightB.push(w);
        out.certainInBoth++;
        continue;
      }
      const p = w / r.tau;
      const a = halfProbability(p);
      const both = (a * a) / p;
      const onlyA = (a * (1 - a)) / p;
      const half = a * r.tau;
      if (v[i] < both + onlyA) {
        inA.push(i);
        weightA.push(half);
      }
      if (v[i] < both || v[i] >= both + onlyA) {
        inB.push(i);
        weightB.push(half);
      }
      if (v[i] < both) out.uncertainInBoth++;
      else if (v[i] < both + onlyA) out.onlyA++;
      else out.onlyB++;
    }
    out.a.push({ ...r, columns: pick(c, inA, weightA) });
    out.b.push({ ...r, columns: pick(c, inB, weightB) });
  }
  return out;
}

const WINNERS_CURSE =
  "Groups are ranked by their own estimates, so the groups on top tend to be those whose sampling error pushed them up: " +
  "their estimates tend to be overstated (the winner's curse), and the true top groups may differ.";

/** The note an answer carries, in words. */
export function selectionNote(rankedBy: RankMode, groupsRanked: number, top: number): string {
  const bonferroni =
    `ci95Simultaneous holds for all ${groupsRanked} ranked group${groupsRanked === 1 ? "" : "s"} together with at least 95% ` +
    `(Bonferroni: each at level 1 − 0.05/${groupsRanked}).`;
  if (rankedBy === "estimate") {
    return `The top ${top} of ${groupsRanked} groups were chosen by their estimates. ${WINNERS_CURSE} Ask with rank=split for estimates that stay unbiased after the choice. ${bonferroni}`;
  }
  return (
    `The top ${top} of ${groupsRanked} groups were chosen on half A of the kept records; the numbers shown come from half B alone, ` +
    `an independent half (records known for certain are in both), so choosing on A does not inflate them. The choice of groups is noisier than with the whole sample, and the true top groups may still differ. ${bonferroni}`
  );
}

const ALL = Number.MAX_SAFE_INTEGER;

/**
 * Runs a compiled query and ranks its groups by `rank`. Without a group-by it is `scan`
 * with no selection. With one, `groupsRanked` counts every group with a kept record (the
 * candidates), and `selection` says how the top ones were chosen.
 *
 * @example rankGroups(reservoirs, compileQuery(query, "bytes"), "split").selection
 *   // { rankedBy: "split", groupsRanked: 37, halves: { rankedOn: "A", estimatedOn: "B", … }, simultaneousZ: 3.20…, note: "…" }
 */
export function rankGroups(
  reservoirs: readonly ScanReservoir[],
  q: CompiledQuery,
  rank: RankMode,
  draws?: (c: KeptColumns) => Float64Array,
): RankedResult {
  const whole = scan(reservoirs, { ...q, top: ALL });
  // Group 0 is no group-by (scan.ts).
  if (q.group === 0) return { ...whole, selection: null };
  const groupsRanked = whole.groups.length;
  const shown = Math.min(q.top, groupsRanked);
  const simultaneousZ = bonferroniZ(groupsRanked);
  if (rank === "estimate") {
    return {
      total: whole.total,
      groups: whole.groups.slice(0, q.top),
      selection: { rankedBy: "estimate", groupsRanked, simultaneousZ, note: selectionNote("estimate", groupsRanked, shown) },
    };
  }
  const halves = splitHalves(reservoirs, draws);
  const onA = scan(halves.a, { ...q, top: ALL }).groups;
  const onB = new Map(scan(halves.b, { ...q, top: ALL }).groups.map((g) => [g.key, g.sum]));
  // Groups seen only in half B rank last, as if estimated 0 on A, in key order.
  const rankedKeys = new Set(onA.map((g) => g.key));
  const order = [...onA.map((g) => g.key), ...whole.groups.map((g) => g.key).filter((key) => !rankedKeys.has(key)).sort()];
  const groups: ScanGroup[] = order.slice(0, q.top).map((key) => ({ key, sum: onB.get(key) ?? { ...EMPTY_SUM } }));
  return {
    total: whole.total,
    groups,
    selection: {
      rankedBy: "split",
      groupsRanked,
      halves: { rankedOn: "A", estimatedOn: "B", onlyA: halves.onlyA, onlyB: halves.onlyB, uncertainInBoth: halves.uncertainInBoth, certainInBoth: halves.certainInBoth },
      simultaneousZ,
      note: selectionNote("split", groupsRanked, shown),
    },
  };
}

/**
 * The Bonferroni interval of one group: estimate ± z·SE with z = Φ⁻¹(1 − 0.025/m), the lower
 * bound lifted as the 95% one is (never below the certain part nor 0), and never narrower than
 * the group's own 95% interval (which may come from a method other than the normal one).
 *
 * @example simultaneousInterval({ estimate: 1000, stdError: 50, ci95: [902, 1098] }, 0, 2.807) // [859.65, 1140.35]
 */
export function simultaneousInterval(
  i: { estimate: number; stdError: number; ci95: readonly [number, number] },
  certain: number,
  z: number,
): [low: number, high: number] {
  const half = z * i.stdError;
  return [Math.min(i.ci95[0], Math.max(i.estimate - half, certain, 0)), Math.max(i.ci95[1], i.estimate + half)];
}
