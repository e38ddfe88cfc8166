// Accuracy at equal sample size: priority sampling (Duffield, Lund, Thorup,
// J. ACM 2007) against uniform reservoir sampling (Vitter, "Random sampling
// with a reservoir", ACM TOMS 11(1), 1985, Algorithm R, estimate n/k·Σ w) on
// subsets holding about 1% of the bytes of heavy-tailed data.
import { estimateSubset } from "~/sampling/estimate";
import { Reservoir } from "~/sampling/reservoir";
import { seededUniform } from "~/sampling/uniform";

export interface AccuracyBench {
  records: number;
  k: number;
  trials: number;
  subsets: number;
  priorityRelRmse: number;
  uniformRelRmse: number;
  ratio: number;
}

export function benchAccuracy(n = 200_000, k = 1024, trials = 200, labels = 100): AccuracyBench {
  const u = seededUniform(1985);
  // Pareto bytes, shape 1.2, at least 40 (invented data); each record gets one of 100 labels (≈ 1% each).
  const bytes = new Float64Array(n);
  const label = new Uint8Array(n);
  for (let i = 0; i < n; i++) {
    bytes[i] = Math.round(40 / Math.pow(u(), 1 / 1.2));
    label[i] = Math.floor(u() * labels);
  }
  const total = bytes.reduce((s, b) => s + b, 0);
  const truth = new Float64Array(labels);
  for (let i = 0; i < n; i++) truth[label[i]] += bytes[i];
  // Subsets with 0.5%–2% of the bytes: about 1% each.
  const subsets = [...truth.keys()].filter((l) => truth[l] / total >= 0.005 && truth[l] / total <= 0.02);
  const sq = { priority: new Float64Array(labels), uniform: new Float64Array(labels) };
  const draw = seededUniform(7);
  for (let t = 0; t < trials; t++) {
    const priority = new Reservoir<number>(k, { uniform: draw });
    for (let i = 0; i < n; i++) priority.offer(i, bytes[i]);
    const kept = priority.kept();
    const uniform = new Int32Array(k);
    for (let i = 0; i < n; i++) {
      if (i < k) uniform[i] = i;
      else {
        // Algorithm R: record i replaces a random slot with probability k/(i+1).
        const j = Math.floor((1 - draw()) * (i + 1));
        if (j < k) uniform[j] = i;
      }
    }
    for (const l of subsets) {
      const p = estimateSubset(priority.tau, kept, (e) => e.weight, undefined, (e) => label[e.item] === l).estimate;
      let sum = 0;
      for (const i of uniform) if (label[i] === l) sum += bytes[i];
      const uEstimate = (n / k) * sum;
      sq.priority[l] += (p - truth[l]) ** 2;
      sq.uniform[l] += (uEstimate - truth[l]) ** 2;
    }
  }
  const relRmse = (s: Float64Array) => subsets.reduce((acc, l) => acc + Math.sqrt(s[l] / trials) / truth[l], 0) / subsets.length;
  const priorityRelRmse = relRmse(sq.priority);
  const uniformRelRmse = relRmse(sq.uniform);
  return { records: n, k, trials, subsets: subsets.length, priorityRelRmse, uniformRelRmse, ratio: priorityRelRmse / uniformRelRmse };
}
