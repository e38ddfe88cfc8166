import type { Kept, ReservoirState } from "./reservoir";

/**
 * Merges priority samples of disjoint record streams into one priority sample
 * of their union (Duffield, Lund, Thorup, J. ACM 54(6), 2007: a priority sample
 * is determined by the priorities alone, so the union's top priorities are found
 * among each part's kept records).
 *
 * k_m = min(k wanted, every input k). The result keeps the k_m highest priorities
 * among all kept records, and τ is the (k_m+1)-th largest value among those
 * priorities together with every input τ_j. With the same u_i this is exactly the
 * reservoir one stream over the union would have built. Time roll-ups (5-minute
 * windows into an hour) are the same operation.
 *
 * @example
 * const a = { k: 2, tau: 3, seen: 3, kept: [{ item: "a", weight: 8, priority: 9 }, { item: "b", weight: 4, priority: 5 }] };
 * const b = { k: 2, tau: 0, seen: 1, kept: [{ item: "c", weight: 6, priority: 7 }] };
 * mergeStates([a, b]) // { k: 2, tau: 5, seen: 4, kept: [a(9), c(7)] }
 */
export function mergeStates<T>(inputs: readonly ReservoirState<T>[], kWanted = Infinity): ReservoirState<T> {
  if (inputs.length === 0) throw new RangeError("merge needs at least one reservoir");
  const k = Math.min(kWanted, ...inputs.map((r) => r.k));
  if (!Number.isInteger(k) || k < 1) throw new RangeError(`merged sample size must be a positive integer, got ${k}`);
  const union: Kept<T>[] = inputs.flatMap((r) => r.kept).sort((a, b) => b.priority - a.priority);
  let tau = Math.max(0, ...inputs.map((r) => r.tau));
  if (union.length > k) tau = Math.max(tau, union[k].priority);
  return {
    k,
    tau,
    seen: inputs.reduce((n, r) => n + r.seen, 0),
    // A no-op for inputs that hold k_j records whenever τ_j > 0; an hourly roll-up above the
    // fine k (rollup.ts) may hold fewer, and a record at or below the common τ must not stay.
    kept: union.slice(0, k).filter((r) => r.priority > tau),
  };
}
