import type { Kept, ReservoirState } from "./reservoir";

/**
 * Rolls priority samples of disjoint record streams (the fine windows of one hour) into one
 * sample of at most `kWanted` records, where `kWanted` may exceed the inputs' k.
 *
 * Why a rule of its own: the merge of Duffield, Lund, Thorup (J. ACM 54(6), 2007; see
 * merge.ts) keeps k_m = min(k wanted, every k_j) records, and that is exactly the sample of one
 * reservoir over the union. Above min k_j no reservoir over the union can be rebuilt (records
 * an input dropped would be needed), but a valid priority sample still is, by the paper's
 * threshold argument (a kept record's estimate max(w, T) is unbiased when T, its inclusion
 * threshold, depends on the other records' priorities only): keep a record when its priority
 * exceeds
 *
 *   τ = max(every input τ_j, the (K+1)-th largest kept priority of the union).
 *
 * For a record i of input j, inclusion is "in input j's top k_j" (threshold τ_j, a function of
 * the others of stream j) and "above every other input's τ_j′" and "in the union's top K";
 * none of these depends on i's own priority, so τ is its threshold and ŵ = max(w, τ) stays
 * unbiased, v̂ = τ·max(0, τ − w) too. Taking τ_j of the other inputs as well is what makes one
 * τ serve every kept record (each input's own τ_j alone would need a τ per record).
 * With K ≤ min k_j this is the merge rule itself (the union's top K all lie above every τ_j).
 * With K ≥ Σ k_j nothing is dropped for lack of room, but records of an input whose τ_j is
 * below the largest τ_j and whose priority lies between the two are dropped: keeping them under
 * the common τ would overstate them (their inclusion chance was w/τ_j, not w/τ).
 *
 * @example
 * const a = { k: 2, tau: 3, seen: 3, kept: [{ item: "a", weight: 8, priority: 9 }, { item: "b", weight: 4, priority: 5 }] };
 * const b = { k: 2, tau: 6, seen: 5, kept: [{ item: "c", weight: 6, priority: 7 }, { item: "d", weight: 1, priority: 6.5 }] };
 * rollUpStates([a, b], 4) // { k: 4, tau: 6, seen: 8, kept: [a(9), c(7), d(6.5)] }: b(5) lies below b's τ = 6
 */
export function rollUpStates<T>(inputs: readonly ReservoirState<T>[], kWanted: number): ReservoirState<T> {
  if (inputs.length === 0) throw new RangeError("a roll-up needs at least one reservoir");
  if (!Number.isInteger(kWanted) || kWanted < 1) throw new RangeError(`roll-up sample size must be a positive integer, got ${kWanted}`);
  const union: Kept<T>[] = inputs.flatMap((r) => r.kept).sort((a, b) => b.priority - a.priority);
  let tau = Math.max(0, ...inputs.map((r) => r.tau));
  if (union.length > kWanted) tau = Math.max(tau, union[kWanted].priority);
  const kept: Kept<T>[] = [];
  for (const record of union) {
    if (kept.length === kWanted || record.priority <= tau) break;
    kept.push(record);
  }
  return { k: kWanted, tau, seen: inputs.reduce((n, r) => n + r.seen, 0), kept };
}

/** The largest hourly sample size worth asking for: the sum of the fine windows' k (k · 3600 / window seconds). */
export function maxHourlySampleSize(sampleSize: number, windowSeconds: number): number {
  return windowSeconds < 3600 && 3600 % windowSeconds === 0 ? sampleSize * (3600 / windowSeconds) : sampleSize;
}
