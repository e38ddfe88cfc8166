import { rollUpStates } from "~/sampling/rollup";

/**
 * The sample-size advisor: from a tenant's own recent windows, the relative standard error
 * (RSE = standard error / true sum) to expect for a subset holding a share s of the weight
 * (bytes by default), at the current k and at other k, two ways.
 *
 * (a) Bound. For one priority sample of k records (Duffield, Lund, Thorup, J. ACM 54(6),
 *     2007), the variance of the estimate of the total W is at most W²/(k−1): conjectured by
 *     Alon, Duffield, Lund, Thorup (PODS 2005), proved by Szegedy, "The DLT priority sampling
 *     is essentially optimal", STOC 2006 (the constant cannot be improved); Daliri, Freire,
 *     Musco, Santos, Zhang, "Simple analysis of priority sampling" (arXiv:2308.05907, 2023)
 *     state it as Var[Ŵ] = Σ_i Var[ŵ_i] ≤ W²/(k−1). It bounds the total, not a subset; it
 *     extends to a subset Q because the ŵ_i are uncorrelated (DLT 2007), so
 *     Var[Ŵ_Q] = Σ_{i∈Q} Var[ŵ_i] ≤ Σ_i Var[ŵ_i] ≤ W²/(k−1), and with W_Q = s·W the subset's
 *     RSE is at most 1/(s·√(k−1)). Over independent windows j the variances add:
 *     RSE ≤ √(Σ_j W_j²/(k_j−1)) / (s·Σ_j W_j). A guarantee, loose for small shares.
 * (b) Empirical. A subset that takes each record with chance s (a "random subset holding
 *     share s" in expectation) has expected estimated variance s·Σ v̂_i over the kept
 *     records (linearity; v̂_i = τ·max(0, τ − w_i), DLT 2007), so
 *     RSE ≈ √(Σ_j Σ_i v̂_ij / s) / Σ_j W_j. A smaller k′ is read off the stored sample exactly:
 *     its top k′ priorities, with τ′ the (k′+1)-th, are the sample k′ would have kept (same
 *     draws). A larger k′ cannot be read off; it is scaled from the current k by the bound's
 *     ratio (k−1)/(k′−1) and marked `scaled`.
 */

export interface AdvisorRecord {
  weight: number;
  priority: number;
}

export interface AdvisorWindow {
  windowStart: number;
  windowSeconds: number;
  /** Roll-ups are per collector: windows of different collectors never join. */
  collector?: number | string;
  k: number;
  tau: number;
  /** The window's exact total weight (its counters), not an estimate. */
  totalWeight: number;
  /** Highest priority first. */
  kept: readonly AdvisorRecord[];
}

/** Shares of the weight the advisor answers for, and the k it compares. */
export const ADVISOR_SHARES = [0.001, 0.01, 0.1] as const;
export const ADVISOR_SAMPLE_SIZES = [256, 1024, 4096, 16384] as const;

/**
 * The bound (a) for windows of totals `totals`, each sampled at k.
 *
 * @example boundRse([1000, 3000], 101, 0.1) // √((1000² + 3000²)/100) / (0.1 · 4000) = 0.7906
 */
export function boundRse(totals: readonly number[], k: number, share: number): number {
  if (k < 2) return Infinity;
  const w = totals.reduce((s, t) => s + t, 0);
  if (w === 0) return 0;
  const variance = totals.reduce((s, t) => s + (t * t) / (k - 1), 0);
  return Math.sqrt(variance) / (share * w);
}

/** Σ v̂ = Σ τ·max(0, τ − w) over a sample's kept records. */
export function varianceSum(tau: number, kept: readonly AdvisorRecord[]): number {
  let v = 0;
  for (const r of kept) if (r.weight < tau) v += tau * (tau - r.weight);
  return v;
}

/**
 * Σ v̂ of the sample k′ ≤ k would have kept with the same draws: the top k′ priorities, τ′ the
 * (k′+1)-th (or the window's τ when there is none). Null when k′ needs records the window did
 * not keep (k′ > its kept count while τ > 0).
 *
 * @example subsampleVarianceSum({ tau: 2, kept: [{ weight: 9, priority: 9 }, { weight: 3, priority: 6 }, { weight: 1, priority: 4 }] }, 1)
 *   // τ′ = 6: only the record of weight 9 stays, and 9 ≥ 6 → 0
 */
export function subsampleVarianceSum(window: Pick<AdvisorWindow, "tau" | "kept">, k: number): number | null {
  const { kept } = window;
  if (k >= kept.length) return window.tau > 0 && k > kept.length ? null : varianceSum(window.tau, kept);
  const tau = Math.max(window.tau, kept[k].priority);
  return varianceSum(tau, kept.slice(0, k));
}

export interface AdvisorRow {
  k: number;
  /** Per share, in ADVISOR_SHARES order. */
  bound: number[];
  empirical: number[];
  /** True when the empirical figures are scaled from a smaller k, not read off the samples. */
  scaled: boolean;
  current: boolean;
}

export interface AdviceInput {
  windows: readonly AdvisorWindow[];
  /** The tenant's k. */
  sampleSize: number;
  sampleSizes?: readonly number[];
  shares?: readonly number[];
}

/** RSE from a total estimated variance, for a random subset holding `share` of `total`. */
export function empiricalRse(varianceTotal: number, total: number, share: number): number {
  return total === 0 ? 0 : Math.sqrt(varianceTotal / share) / total;
}

/** The advisor's table: one row per k (the tenant's k included), bound and empirical RSE per share. */
export function adviseSampleSize(input: AdviceInput): AdvisorRow[] {
  const shares = input.shares ?? ADVISOR_SHARES;
  const sizes = [...new Set([...(input.sampleSizes ?? ADVISOR_SAMPLE_SIZES), input.sampleSize])].sort((a, b) => a - b);
  const totals = input.windows.map((w) => w.totalWeight);
  const total = totals.reduce((s, t) => s + t, 0);
  return sizes.map((k) => {
    let scaled = false;
    let variance = 0;
    for (const w of input.windows) {
      const exact = subsampleVarianceSum(w, k);
      if (exact !== null) variance += exact;
      else {
        scaled = true;
        variance += (varianceSum(w.tau, w.kept) * (w.k - 1)) / (k - 1);
      }
    }
    return {
      k,
      bound: shares.map((s) => boundRse(totals, k, s)),
      empirical: shares.map((s) => empiricalRse(variance, total, s)),
      scaled,
      current: k === input.sampleSize,
    };
  });
}

export interface RollUpTradeOff {
  hourlySampleSize: number;
  /** Kept records per hour (all collectors): fine windows as stored, and the hourly window the roll-up would write. */
  keptPerHourFine: number;
  keptPerHourHourly: number;
  /** Empirical RSE of a random subset holding `share` of the weight, over the same hours. */
  rseFine: number;
  rseHourly: number;
  /** rseHourly / rseFine: how much wider every interval gets after the roll-up. */
  widening: number;
}

/**
 * What rolling the given fine windows up into hours at `hourlySampleSize` would do: the roll-up
 * (app/sampling/rollup.ts) is run on the stored samples themselves, so the hourly τ and v̂ are
 * those the retention run would produce with the same draws.
 */
export function rollUpTradeOff(windows: readonly AdvisorWindow[], hourlySampleSize: number, share: number): RollUpTradeOff {
  const hours = new Map<string, AdvisorWindow[]>();
  const distinctHours = new Set<number>();
  for (const w of windows) {
    const hour = Math.floor(w.windowStart / 3_600_000) * 3_600_000;
    distinctHours.add(hour);
    const key = `${w.collector ?? ""}:${hour}`;
    const list = hours.get(key);
    if (list) list.push(w);
    else hours.set(key, [w]);
  }
  let fineKept = 0;
  let fineVariance = 0;
  let hourlyKept = 0;
  let hourlyVariance = 0;
  let total = 0;
  for (const list of hours.values()) {
    const rolled = rollUpStates(
      list.map((w) => ({ k: w.k, tau: w.tau, seen: 0, kept: w.kept.map((r) => ({ item: null, weight: r.weight, priority: r.priority })) })),
      hourlySampleSize,
    );
    hourlyKept += rolled.kept.length;
    hourlyVariance += varianceSum(rolled.tau, rolled.kept);
    for (const w of list) {
      fineKept += w.kept.length;
      fineVariance += varianceSum(w.tau, w.kept);
      total += w.totalWeight;
    }
  }
  const n = Math.max(1, distinctHours.size);
  const rseFine = empiricalRse(fineVariance, total, share);
  const rseHourly = empiricalRse(hourlyVariance, total, share);
  return {
    hourlySampleSize,
    keptPerHourFine: fineKept / n,
    keptPerHourHourly: hourlyKept / n,
    rseFine,
    rseHourly,
    widening: rseFine === 0 ? (rseHourly === 0 ? 1 : Infinity) : rseHourly / rseFine,
  };
}

/** The share of the bytes the roll-up trade-off in Settings is shown for (a 1% subset). */
export const TRADE_OFF_SHARE = 0.01;
