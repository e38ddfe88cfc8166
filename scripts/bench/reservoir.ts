// Reservoir update throughput against the floor of drawing u and computing w/u.
import { Reservoir } from "~/sampling/reservoir";
import { defaultUniform, seededUniform } from "~/sampling/uniform";

export interface ReservoirBench {
  records: number;
  k: number;
  updatesPerSecond: number;
  nsPerUpdate: number;
  floorNsPerRecord: number;
  ratioToFloor: number;
  entered: number;
}

/** Heavy-tailed weights (Pareto, shape 1.2, minimum 40 bytes): invented benchmark data. */
function weights(n: number): Float64Array {
  const u = seededUniform(12345);
  const w = new Float64Array(n);
  for (let i = 0; i < n; i++) w[i] = 40 / Math.pow(u(), 1 / 1.2);
  return w;
}

function timeFloor(w: Float64Array): number {
  const uniform = defaultUniform;
  let sink = 0;
  const t0 = process.hrtime.bigint();
  for (let i = 0; i < w.length; i++) {
    const q = w[i] / uniform();
    if (q > sink) sink = q;
  }
  const ns = Number(process.hrtime.bigint() - t0);
  if (sink === 0) throw new Error("unreachable: keeps the loop from being optimised away");
  return ns;
}

function timeReservoir(w: Float64Array, k: number): { ns: number; entered: number } {
  const r = new Reservoir<number>(k, { uniform: defaultUniform });
  let entered = 0;
  const t0 = process.hrtime.bigint();
  for (let i = 0; i < w.length; i++) if (r.offer(i, w[i])) entered++;
  return { ns: Number(process.hrtime.bigint() - t0), entered };
}

export function benchReservoir(records = 10_000_000, k = 1024, rounds = 5): ReservoirBench {
  const w = weights(records);
  // Interleave the rounds so both loops see the same machine state; keep the best of each.
  let floor = Infinity;
  let update = Infinity;
  let entered = 0;
  for (let round = 0; round < rounds; round++) {
    floor = Math.min(floor, timeFloor(w));
    const r = timeReservoir(w, k);
    if (r.ns < update) ({ ns: update, entered } = { ns: r.ns, entered: r.entered });
  }
  return {
    records,
    k,
    updatesPerSecond: records / (update / 1e9),
    nsPerUpdate: update / records,
    floorNsPerRecord: floor / records,
    ratioToFloor: update / floor,
    entered,
  };
}
