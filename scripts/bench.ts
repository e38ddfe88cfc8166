// `npm run bench`: figures and ratios against baselines measured in the same run.
// Nothing here is asserted; the goals are printed beside the figures.
// `npm run bench -- --quick` runs smaller sizes (for a smoke check, not for the README);
// `--only demo,query` runs the named sections only (demo, reservoir, ingest, ipfix, collect, query, accuracy).
import { availableParallelism, loadavg } from "node:os";
import { benchAccuracy } from "./bench/accuracy";
import { benchCollect } from "./bench/collect";
import { benchDemo } from "./bench/demo";
import { benchIpfixDecode } from "./bench/ipfix-decode";
import { benchIngest } from "./bench/ingest";
import { benchQuery } from "./bench/query";
import { benchReservoir } from "./bench/reservoir";
import { fmt } from "./bench/util";

const quick = process.argv.includes("--quick");
const onlyAt = process.argv.indexOf("--only");
const only = onlyAt === -1 ? null : new Set((process.argv[onlyAt + 1] ?? "").split(","));
const want = (section: string) => only === null || only.has(section);
const scale = quick ? 0.1 : 1;
const mb = (bytes: number) => `${fmt(bytes / 1048576)} MiB`;

function section(title: string) {
  console.log(`\n== ${title}`);
}

// First, so that build/ exists for the production-mode query figures below.
if (want("demo") || want("query")) {
  section("First run: `npm run demo` on a fresh database (a child process; spawn to the first estimate answered)");
  const m = await benchDemo();
  const line = (label: string, s: { usableSeconds: number; listeningSeconds: number; firstEstimateMs: number }) =>
    console.log(`${label.padEnd(23)}usable after ${fmt(s.usableSeconds, 1)} s (URL printed after ${fmt(s.listeningSeconds, 1)} s), first estimate ${fmt(s.firstEstimateMs, 0)} ms`);
  console.log(`load average           ${loadavg().map((l) => fmt(l, 1)).join(" / ")} over 1 / 5 / 15 min after these runs, on ${availableParallelism()} cores (other work slows every figure here)`);
  line("fresh (build + seed)", m.fresh);
  console.log(`                       ${m.fresh.buildLine ?? "(no build line)"} ${m.fresh.seedLine ?? ""}   (goal: usable ≤ 30 s, first estimate < 1 s)`);
  line("restart (seeded)", m.restart);
  console.log(
    `development server     first estimate ${fmt(m.development.firstEstimateMs, 0)} ms, usable ${fmt(m.development.usableSeconds, 1)} s after its spawn   (the baseline: what the demo served before; Vite compiles on first request; seed not counted)`,
  );
}

if (want("reservoir")) {
  section(`Reservoir updates (k = 1024, ${fmt(10 * scale, 0)} million heavy-tailed records, best of 5)`);
  const r = benchReservoir(10_000_000 * scale);
  console.log(`updates/s              ${fmt(r.updatesPerSecond / 1e6)} M   (goal ≥ 40 M)`);
  console.log(`ns per update          ${fmt(r.nsPerUpdate, 2)}`);
  console.log(`floor ns per record    ${fmt(r.floorNsPerRecord, 2)}   (draw u and compute w/u only)`);
  console.log(`update / floor         ${fmt(r.ratioToFloor, 2)}×   (goal ≤ 2×)`);
  console.log(`records that entered   ${fmt(r.entered, 0)}   (k·(1 + ln(n/k)) ≈ ${fmt(r.k * (1 + Math.log(r.records / r.k)), 0)} expected for i.i.d. priorities)`);
}

let httpRecordsPerSecond: number | undefined;
if (want("ingest")) {
  section(`Ingest over HTTP on loopback (NDJSON batches of 5 000, k = 1024, 5-minute windows, ${fmt(2 * scale, 1)} million records over one hour)`);
  const i = await benchIngest(2_000_000 * scale);
  httpRecordsPerSecond = i.httpRecordsPerSecond;
  console.log(`HTTP ingest            ${fmt(i.httpRecordsPerSecond, 0)} records/s   (goal ≥ 200 000)`);
  console.log(`parse + validate only  ${fmt(i.ceilingRecordsPerSecond, 0)} records/s   (the ceiling: same bodies, same code, no HTTP, no sampling, no storage)`);
  console.log(`HTTP / ceiling         ${fmt(i.httpRecordsPerSecond / i.ceilingRecordsPerSecond, 2)}   (goal ≥ 0.6)`);
  console.log(`keep everything        ${fmt(i.keepAllRecordsPerSecond, 0)} records/s   (the same records inserted into a plain SQLite table, in process)`);
  console.log(`ingest ratio           ${fmt(i.httpRecordsPerSecond / i.keepAllRecordsPerSecond, 2)}× the keep-everything insert rate`);
  console.log(`on disk                Weir ${mb(i.weirBytes)} (${i.windows} reservoirs) against ${mb(i.keepAllBytes)}: ${fmt(i.keepAllBytes / i.weirBytes, 0)}× smaller`);
}

if (want("ipfix")) {
  section(`IPFIX decode ceiling (one core; 15-field template, 30 records a message, ${fmt(20_000 * scale, 0)} messages, best of 5)`);
  const d = await benchIpfixDecode(Math.round(20_000 * scale));
  console.log(`decoder                ${fmt(d.recordsPerSecond / 1e6, 2)} M records/s, ${fmt(d.nsPerRecord, 0)} ns a record   (goal ≥ 2 M/s)`);
  console.log(`JSON validation        ${fmt(d.jsonRecordsPerSecond / 1e6, 2)} M records/s   (parseFlowBatch on the same records as objects)`);
  console.log(`decode / JSON          ${fmt(d.ratioToJson, 2)}×`);
}

if (want("collect")) {
  section(`IPFIX over UDP on loopback, end to end (steady offered rates, ${quick ? 1 : 4} s each; k = 1024, 5-minute windows)`);
  const c = await benchCollect(quick ? [100_000, 250_000] : [250_000, 400_000, 500_000, 600_000, 700_000, 800_000, 1_000_000], quick ? 1 : 4);
  for (const step of c.steps) {
    console.log(
      `offered ${fmt(step.offeredPerSecond, 0).padStart(9)}/s   stored ${fmt(step.storedPerSecond, 0).padStart(9)}/s   loss ${fmt(step.lossPercent, 3).padStart(6)}%   (lost per the sequence numbers: ${fmt(step.reportedLost, 0)})`,
    );
  }
  if (c.best) {
    console.log(`highest lossless rate  ${fmt(c.best.offeredPerSecond, 0)} records/s with < 0.1% loss, ${fmt(c.best.storedPerSecond, 0)} stored/s   (goal ≥ 500 000)`);
    if (httpRecordsPerSecond !== undefined) console.log(`UDP / JSON over HTTP   ${fmt(c.best.storedPerSecond / httpRecordsPerSecond, 2)}×   (the HTTP ingest figure above; goal ≥ 2×)`);
  } else {
    console.log("highest lossless rate  none of the offered rates stayed under 0.1% loss");
  }
  console.log(`messages               ${c.recordsPerMessage} records, ${c.bytesPerMessage} bytes each; the sender shares the two cores with the server`);
}

if (want("query")) {
  section(`Query latency (one day: 288 windows × k = 1024 from ${fmt(10 * scale, 0)} million records; CIDR filter + group by destination /24)`);
  const q = await benchQuery(10_000_000 * scale);
  console.log(`data set               ${q.windows} windows, ${fmt(q.keptRecords, 0)} kept records, built in ${fmt(q.buildSeconds, 0)} s`);
  console.log(`first query, cold      ${fmt(q.firstQueryMs, 0)} ms   (a new server process on the production build, warm-up off: the day's packed columns read from SQLite; goal < 300 ms)`);
  console.log(`  unpacked baseline    ${fmt(q.firstQueryUnpackedMs, 0)} ms   (the same, before packing: one kept_records row per kept record) → packed / unpacked ${fmt(q.firstQueryMs / q.firstQueryUnpackedMs, 2)}×`);
  console.log(`  packing the day      ${fmt(q.packSeconds, 2)} s, ${mb(q.packedBytes)} written   (what the server's packing timer does for closed windows); database ${mb(q.unpackedWeirBytes)} → ${mb(q.weirBytes)}`);
  console.log(`  on the dev server    ${fmt(q.firstQueryDevelopmentMs, 0)} ms   (the same first question against the development server: Vite compiles the route first)`);
  console.log(`p50 / p95 over 50      ${fmt(q.p50Ms, 1)} / ${fmt(q.p95Ms, 1)} ms over HTTP, production build   (goal p50 ≤ 50 ms)`);
  console.log(`exact SUM, p50 of ${q.exactRuns}    ${fmt(q.exactP50Ms, 0)} ms   (full scan of the keep-everything table)`);
  console.log(`speed-up               ${fmt(q.exactP50Ms / q.p50Ms, 0)}×   (goal ≥ 50×)`);
  console.log(`on disk                Weir ${mb(q.weirBytes)} against ${mb(q.keepAllBytes)}`);
  console.log(`checked answer         |estimate − exact| = ${fmt(q.zOfCheckedQuery, 2)} standard errors`);

  section("Roll-up of that day into hourly windows (retention after N days), and the same questions again");
  const u = q.rollUp;
  console.log(`roll-up                ${q.windows} windows → ${u.hourlyWindows} hourly, ${fmt(q.keptRecords, 0)} → ${fmt(u.keptAfter, 0)} kept records, in ${fmt(u.rollUpSeconds, 2)} s`);
  console.log(`read the day only      ${fmt(u.readSeconds, 2)} s   (decode every reservoir: the floor) → roll-up / read ${fmt(u.rollUpSeconds / u.readSeconds, 2)}×`);
  console.log(
    `interval widening     ${fmt(u.widening, 2)}× at hourly K = ${u.hourlySampleSize} (standard error after / before the roll-up, geometric mean over ${u.stdErrorRatios.length} questions: ${u.stdErrorRatios.map((r) => fmt(r, 2)).join(", ")})`,
  );
  console.log(`exact bytes            before ${u.exactBytesBefore}, after ${u.exactBytesAfter}   (${u.exactBytesBefore === u.exactBytesAfter ? "equal" : "DIFFERENT"})`);
  console.log(`p50 over 50            ${fmt(u.p50Ms, 1)} ms after the roll-up, against ${fmt(q.p50Ms, 1)} ms before`);
  console.log(`checked answer         |estimate − exact| = ${fmt(u.zOfCheckedQuery, 2)} standard errors after the roll-up`);
}

if (want("accuracy")) {
  section("Accuracy at equal k: priority sampling against uniform reservoir sampling (Algorithm R)");
  const a = benchAccuracy();
  console.log(`set-up                 ${fmt(a.records, 0)} Pareto records, k = ${a.k}, ${a.trials} trials, ${a.subsets} subsets holding 0.5–2% of the bytes`);
  console.log(`relative RMSE          priority ${fmt(a.priorityRelRmse, 3)}, uniform ${fmt(a.uniformRelRmse, 3)}`);
  console.log(`priority / uniform     ${fmt(a.ratio, 3)}   (goal ≤ 1/3)`);
}
