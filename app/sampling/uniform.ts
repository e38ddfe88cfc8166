/**
 * A source of uniform draws in (0, 1] — the u_i of priority sampling
 * (Duffield, Lund, Thorup, J. ACM 54(6), 2007, §1: q_i = w_i / u_i).
 * The interval is open at 0 so that a priority w/u is always finite.
 */
export type UniformSource = () => number;

/**
 * The default source: `1 - Math.random()`, which lies in (0, 1] because
 * Math.random() lies in [0, 1) (ECMA-262 §21.3.2.27).
 *
 * @example defaultUniform() // 0.7071… (some number in (0, 1])
 */
export const defaultUniform: UniformSource = () => 1 - Math.random();

/**
 * A seeded, reproducible source for tests and benchmarks: the 32-bit
 * "mulberry32" generator (public domain, T. Ettinger), mapped to (0, 1] as
 * (x + 1) / 2^32. Its 2^-32 resolution is far finer than any tolerance the
 * statistical tests use. Not for security.
 *
 * @example const u = seededUniform(42); u() // same value on every run
 */
export function seededUniform(seed: number): UniformSource {
  let state = seed >>> 0;
  return () => {
    state = (state + 0x6d2b79f5) >>> 0;
    let t = state;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return (((t ^ (t >>> 14)) >>> 0) + 1) / 4294967296;
  };
}
