// Synthetic test populations. Invented data: they exercise the estimators; the
// checks compare against formulas from the published method, not against these values.
import { seededUniform } from "~/sampling/uniform";

export interface TestRecord {
  id: number;
  bytes: number;
  packets: number;
  port: number;
  block: number;
}

/**
 * A heavy-tailed population: bytes follow a Pareto law with shape `alpha`
 * (a few records carry most bytes, as flow sizes do — common practice to model
 * them so), packets are bytes over a packet size drawn in [64, 1500].
 */
export function heavyTailedPopulation(n: number, seed: number, alpha = 1.5): TestRecord[] {
  const u = seededUniform(seed);
  const ports = [443, 80, 53, 22, 123];
  return Array.from({ length: n }, (_, id) => {
    const bytes = Math.max(40, Math.round(40 / Math.pow(u(), 1 / alpha)));
    const packetSize = 64 + Math.floor(u() * 1437);
    return {
      id,
      bytes,
      packets: Math.max(1, Math.ceil(bytes / packetSize)),
      port: ports[Math.floor(u() * ports.length)],
      block: Math.floor(u() * 20),
    };
  });
}

export function trueSum(population: TestRecord[], include: (r: TestRecord) => boolean, value: (r: TestRecord) => number): number {
  return population.reduce((s, r) => (include(r) ? s + value(r) : s), 0);
}

/** Mean, variance (n − 1 denominator) and 4th central moment of a sample. */
export function moments(xs: number[]): { mean: number; variance: number; m4: number } {
  const n = xs.length;
  const mean = xs.reduce((s, x) => s + x, 0) / n;
  let m2 = 0;
  let m4 = 0;
  for (const x of xs) {
    const d = x - mean;
    m2 += d * d;
    m4 += d * d * d * d;
  }
  return { mean, variance: m2 / (n - 1), m4: m4 / n };
}
