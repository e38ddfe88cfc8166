// Shared by the selection tests and the measurement printed in the report: a fixed invented
// population of flows in groups (destination ports), sampled by the real reservoir and scanned.
import { toColumns, type KeptRow } from "~/query/columns";
import { parseEstimateRequest } from "~/query/request";
import { compileQuery, type ScanReservoir } from "~/query/scan";
import { rankGroups } from "~/query/selection";
import type { RankMode } from "~/query/request";
import { Reservoir } from "~/sampling/reservoir";
import { seededUniform } from "~/sampling/uniform";
import type { KeptColumns } from "~/query/columns";

export interface SimRecord {
  bytes: number;
  packets: number;
  dport: number;
  window: number;
  serial: number;
}

export const WINDOWS = 4;
export const WINDOW_MS = 300_000;
export const T0 = Date.UTC(2024, 4, 1, 2, 0);

/**
 * `groups` groups of `perGroup` flows: one list of flow sizes, Pareto(α = 1.5) from 40 bytes
 * (heavy-tailed flow sizes: common practice), drawn once and given to every group scaled by
 * 1 + g/100, so the groups' truths are close (within 20%) and ranking them is hard, as with
 * many similar customers. Spread over four windows; addresses in RFC 5737 space.
 */
export function simPopulation(groups: number, perGroup: number, seed: number): SimRecord[] {
  const u = seededUniform(seed);
  const sizes = Array.from({ length: perGroup }, () => Math.max(40, Math.round(40 / Math.pow(u(), 1 / 1.5))));
  const out: SimRecord[] = [];
  let serial = 0;
  for (let g = 0; g < groups; g++) {
    for (const size of sizes) {
      const bytes = Math.round(size * (1 + g / 100));
      out.push({ bytes, packets: Math.max(1, Math.ceil(bytes / 1000)), dport: 1000 + g, window: Math.floor(u() * WINDOWS), serial: serial++ });
    }
  }
  return out;
}

export function truthByGroup(population: readonly SimRecord[]): Map<string, number> {
  const truth = new Map<string, number>();
  for (const r of population) truth.set(String(r.dport), (truth.get(String(r.dport)) ?? 0) + r.bytes);
  return truth;
}

const SRC = new Uint8Array([0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0xff, 0xff, 198, 51, 100, 7]);
const DST = new Uint8Array([0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0xff, 0xff, 203, 0, 113, 9]);

/**
 * One trial: a reservoir of size k per window over the population with the seeded uniform,
 * the kept records as scan columns. `trial` moves every record's start time by a whole
 * number of milliseconds, so the split's coins (a hash of the stored fields) are drawn anew
 * in every trial while the truth stays the same.
 */
export function sampleTrial(population: readonly SimRecord[], k: number, u: () => number, trial: number): ScanReservoir[] {
  const reservoirs = Array.from({ length: WINDOWS }, () => new Reservoir<SimRecord>(k, { uniform: u }));
  for (const r of population) reservoirs[r.window].offer(r, r.bytes);
  return reservoirs.map((res, w) => {
    const rows: KeptRow[] = res.kept().map(({ item, weight }) => ({
      weight,
      record: {
        src: SRC, dst: DST, sport: 40000 + (item.serial % 20000), dport: item.dport, proto: 6,
        bytes: BigInt(item.bytes), packets: BigInt(item.packets),
        start: T0 + w * WINDOW_MS + item.serial + 7 * trial,
      },
    }));
    return { tau: res.tau, collector: "edge-1", windowStart: T0 + w * WINDOW_MS, columns: toColumns(rows) };
  });
}

export function byPortQuery(top: number) {
  const parsed = parseEstimateRequest({ from: T0, to: T0 + WINDOWS * WINDOW_MS, groupBy: "dport", top, metric: "bytes" });
  if (!parsed.ok) throw new Error(parsed.message);
  return compileQuery(parsed.query, "bytes");
}

export interface BiasRun {
  trials: number;
  /** Mean of (estimate − truth) of the first-ranked group, and its Monte Carlo standard error. */
  meanError: number;
  meanErrorSe: number;
  /** Mean of (estimate − truth)/truth of the first-ranked group. */
  meanRelativeError: number;
  /** Mean of the reported standard error of the first-ranked group. */
  meanReportedSe: number;
  /** Mean count of the true top `top` among the reported top `top`. */
  meanOverlap: number;
  /** Share of trials where every returned group's truth lay in its ci95Simultaneous-style band z·SE (z given). */
  firstRankedCovered95: number;
}

/**
 * Mean estimate error of the first-ranked group over `trials` fixed-seed trials, for a rank mode.
 */
export function measureBias(
  population: readonly SimRecord[],
  options: { k: number; top: number; trials: number; seed: number; rank: RankMode; draws?: (c: KeptColumns) => Float64Array },
): BiasRun {
  const truth = truthByGroup(population);
  const trueTop = new Set([...truth].sort((a, b) => b[1] - a[1]).slice(0, options.top).map(([key]) => key));
  const u = seededUniform(options.seed);
  const q = byPortQuery(options.top);
  let sum = 0;
  let sumSq = 0;
  let rel = 0;
  let se = 0;
  let overlap = 0;
  let covered = 0;
  for (let t = 0; t < options.trials; t++) {
    const result = rankGroups(sampleTrial(population, options.k, u, t), q, options.rank, options.draws);
    const first = result.groups[0];
    const err = first.sum.estimate - truth.get(first.key)!;
    sum += err;
    sumSq += err * err;
    rel += err / truth.get(first.key)!;
    const firstSe = Math.sqrt(first.sum.variance);
    se += firstSe;
    if (Math.abs(err) <= 1.959963984540054 * firstSe) covered++;
    overlap += result.groups.filter((g) => trueTop.has(g.key)).length;
  }
  const n = options.trials;
  const mean = sum / n;
  return {
    trials: n,
    meanError: mean,
    meanErrorSe: Math.sqrt((sumSq / n - mean * mean) / (n - 1)),
    meanRelativeError: rel / n,
    meanReportedSe: se / n,
    meanOverlap: overlap / n,
    firstRankedCovered95: covered / n,
  };
}
