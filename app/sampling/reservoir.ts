import { PriorityQueue } from "@datastructures-js/priority-queue";
import { defaultUniform, type UniformSource } from "./uniform";

/** One record kept in a reservoir, with the weight and priority it was sampled by. */
export interface Kept<T> {
  readonly item: T;
  /** w_i > 0: the attribute the tenant samples by (bytes or packets). */
  readonly weight: number;
  /** q_i = w_i / u_i. */
  readonly priority: number;
}

/** The state a reservoir can be rebuilt from (storage, merge, sample files). */
export interface ReservoirState<T> {
  /** Sample size: at most k records are kept. */
  k: number;
  /** τ: the (k+1)-th highest priority seen; 0 while at most k records were seen. */
  tau: number;
  /** How many records were offered in all. */
  seen: number;
  kept: Kept<T>[];
}

export interface ReservoirOptions<T> {
  /** Where the u_i come from; inject a seeded source in tests. */
  uniform?: UniformSource;
  /** Called with each kept record that a newcomer pushes out. */
  onEvict?: (evicted: Kept<T>) => void;
}

const byPriority = <T>(a: Kept<T>, b: Kept<T>) => a.priority - b.priority;

/**
 * A streaming priority sample of size k (Duffield, Lund, Thorup, "Priority
 * sampling for estimation of arbitrary subset sums", J. ACM 54(6), 2007).
 *
 * Each offered record gets priority q = w/u with u uniform in (0,1]; the k
 * highest priorities are kept in a min-heap, and τ is the largest priority that
 * was not kept (= the (k+1)-th highest seen). Once the heap is full, a record
 * whose priority does not beat the heap minimum is rejected by one comparison.
 *
 * @example
 * const r = new Reservoir<string>(2, { uniform: () => 0.5 });
 * r.offer("a", 10); r.offer("b", 1); r.offer("c", 4);
 * r.tau // 2  (b's priority 1/0.5; a (20) and c (8) are kept)
 */
export class Reservoir<T> {
  readonly k: number;
  private readonly heap: PriorityQueue<Kept<T>>;
  private readonly uniform: UniformSource;
  private readonly onEvict: ((evicted: Kept<T>) => void) | undefined;
  /** Cached heap minimum while full, so rejection needs no heap access. */
  private floor = 0;
  private full = false;
  private _tau: number;
  private _seen: number;

  constructor(k: number, options: ReservoirOptions<T> = {}, state?: Omit<ReservoirState<T>, "k">) {
    if (!Number.isInteger(k) || k < 1) throw new RangeError(`sample size k must be a positive integer, got ${k}`);
    this.k = k;
    this.uniform = options.uniform ?? defaultUniform;
    this.onEvict = options.onEvict;
    this._tau = state?.tau ?? 0;
    this._seen = state?.seen ?? 0;
    const kept = state?.kept ?? [];
    if (kept.length > k) throw new RangeError(`a reservoir of k = ${k} cannot hold ${kept.length} records`);
    this.heap = PriorityQueue.fromArray([...kept], byPriority);
    this.refreshFloor();
  }

  /** Rebuilds a reservoir from stored state (see serialize.ts for the JSON form). */
  static restore<T>(state: ReservoirState<T>, options: ReservoirOptions<T> = {}): Reservoir<T> {
    return new Reservoir(state.k, options, state);
  }

  /** τ: 0 while at most k records were seen (every estimate is then exact). */
  get tau(): number {
    return this._tau;
  }

  get seen(): number {
    return this._seen;
  }

  get size(): number {
    return this.heap.size();
  }

  /**
   * Offers one record of weight w > 0. Returns its kept entry when it entered
   * the sample (possibly evicting another, reported through `onEvict`), null
   * when it was rejected.
   * Pass `u` to use a given draw (coordinated priorities, tests); otherwise one
   * is drawn from the uniform source.
   *
   * @example new Reservoir<number>(1).offer(7, 1500, 0.5) // { item: 7, weight: 1500, priority: 3000 }
   */
  offer(item: T, weight: number, u: number = this.uniform()): Kept<T> | null {
    if (!(weight > 0 && weight < Infinity)) throw new RangeError(`weight must be a positive finite number, got ${weight}`);
    if (!(u > 0 && u <= 1)) throw new RangeError(`uniform draw must lie in (0, 1], got ${u}`);
    const priority = weight / u;
    this._seen++;
    if (this.full) {
      if (priority <= this.floor) {
        if (priority > this._tau) this._tau = priority;
        return null;
      }
      const evicted = this.heap.dequeue()!;
      if (evicted.priority > this._tau) this._tau = evicted.priority;
      const entry = { item, weight, priority };
      this.heap.enqueue(entry);
      this.floor = this.heap.front()!.priority;
      this.onEvict?.(evicted);
      return entry;
    }
    const entry = { item, weight, priority };
    this.heap.enqueue(entry);
    this.refreshFloor();
    return entry;
  }

  /** The kept records, highest priority first. */
  kept(): Kept<T>[] {
    return this.heap.toArray().sort((a, b) => b.priority - a.priority);
  }

  /** A plain copy of the state (kept records highest priority first). */
  state(): ReservoirState<T> {
    return { k: this.k, tau: this._tau, seen: this._seen, kept: this.kept() };
  }

  private refreshFloor(): void {
    this.full = this.heap.size() >= this.k;
    this.floor = this.full ? this.heap.front()!.priority : 0;
  }
}
