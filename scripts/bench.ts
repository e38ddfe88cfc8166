// `npm run bench`: figures and ratios against baselines measured in the same run.
// Nothing here is asserted; the goals are printed beside the figures.
import { benchReservoir } from "./bench/reservoir";

const fmt = (n: number, digits = 1) => n.toLocaleString("en-US", { maximumFractionDigits: digits });

function section(title: string) {
  console.log(`\n== ${title}`);
}

section("Reservoir updates (k = 1024, 10 million heavy-tailed records, best of 5)");
const r = benchReservoir();
console.log(`updates/s            ${fmt(r.updatesPerSecond / 1e6)} M   (goal ≥ 40 M)`);
console.log(`ns per update        ${fmt(r.nsPerUpdate, 2)}`);
console.log(`floor ns per record  ${fmt(r.floorNsPerRecord, 2)}   (draw u and compute w/u only)`);
console.log(`update / floor       ${fmt(r.ratioToFloor, 2)}×   (goal ≤ 2×)`);
console.log(`records that entered ${fmt(r.entered, 0)}   (k·(1 + ln(n/k)) ≈ ${fmt(r.k * (1 + Math.log(r.records / r.k)), 0)} expected for i.i.d. priorities)`);
