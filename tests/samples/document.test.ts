import { describe, expect, it } from "vitest";
import { parseFlowRecord, type FlowRecord } from "~/flow/record";
import { parseAddress } from "~/net/address";
import { Reservoir } from "~/sampling/reservoir";
import { parseSampleFile, SAMPLE_FILE_VERSION, SampleFileError, toSampleFile, type SampleFile, type SampleSet, type SampleWindow } from "~/samples/document";

// The sample file (app/samples/document.ts, docs/sample-file.md): each window is a priority
// sample (Duffield, Lund, Thorup, J. ACM 54(6), 2007) and must keep that method's invariants.

const T0 = Date.UTC(2024, 4, 1, 2, 0);
const WINDOW_SECONDS = 300;

function record(src: string, bytes: bigint, packets: bigint, start: number | null): FlowRecord {
  return {
    src: parseAddress(src),
    dst: parseAddress("203.0.113.80"),
    sport: 49152,
    dport: 443,
    proto: 6,
    bytes,
    packets,
    start,
    end: start === null ? null : start + 2000,
    ingressInterface: 3,
    egressInterface: null,
    srcAs: 64496,
    dstAs: null,
  };
}

/** A window sampled by a real reservoir with fixed u_i, so τ and the kept set follow the method. */
function sampled(collector: string, windowStart: number, k: number, offers: [FlowRecord, number][], node = "node-a"): SampleWindow {
  const r = new Reservoir<FlowRecord>(k);
  const exact = { records: 0n, bytes: 0n, packets: 0n };
  for (const [rec, u] of offers) {
    r.offer(rec, Number(rec.bytes), u);
    exact.records += 1n;
    exact.bytes += rec.bytes;
    exact.packets += rec.packets;
  }
  const state = r.state();
  return {
    collector,
    windowStart,
    windowSeconds: WINDOW_SECONDS,
    k,
    tau: state.tau,
    seen: state.seen,
    exact,
    kept: [...state.kept].sort((a, b) => b.priority - a.priority).map((e) => ({ priority: e.priority, weight: e.weight, record: e.item })),
    provenance: { node, weightAttribute: "bytes", updatedAt: T0 + 600_000 },
  };
}

function sampleSet(): SampleSet {
  const at = (s: number) => T0 + s * 1000;
  return {
    exportedAt: T0 + 3_600_000,
    from: T0,
    to: T0 + 2 * WINDOW_SECONDS * 1000,
    windows: [
      // Five records into k = 3: τ > 0, three kept.
      sampled("edge-1", T0, 3, [
        [record("198.51.100.7", 1500n, 2n, at(10)), 0.5],
        [record("198.51.100.8", 64_000n, 50n, at(20)), 0.9],
        [record("192.0.2.10", 40n, 1n, at(30)), 0.01],
        [record("2001:db8::1", 900_000n, 700n, null), 0.3],
        [record("203.0.113.5", 7000n, 6n, at(299)), 0.2],
      ]),
      // Two records into k = 4: τ = 0, everything kept; a counter past 2^53 travels as a string.
      sampled("edge-2", T0 + WINDOW_SECONDS * 1000, 4, [
        [record("198.51.100.9", 18_446_744_073_709_551_615n, 3n, at(400)), 0.7],
        [record("192.0.2.11", 500n, 1n, at(599)), 0.4],
      ]),
    ],
  };
}

/** The issues of a document that must fail, as "path: message" lines. */
function issues(input: unknown): string[] {
  try {
    parseSampleFile(input);
  } catch (error) {
    expect(error).toBeInstanceOf(SampleFileError);
    return (error as SampleFileError).issues.map((i) => `${i.path}: ${i.message}`);
  }
  throw new Error("the document parsed, but it should have failed");
}

/** A fresh JSON form of the valid set, to break in one place. */
const file = () => JSON.parse(JSON.stringify(toSampleFile(sampleSet()))) as SampleFile & { windows: any[] };

describe("the sample file", () => {
  it("round-trips: parseSampleFile(toSampleFile(x)) equals x, as a value and as JSON text", () => {
    const x = sampleSet();
    expect(x.windows[0].tau).toBeGreaterThan(0);
    expect(x.windows[0].kept).toHaveLength(3);
    expect(x.windows[1].tau).toBe(0);
    expect(parseSampleFile(toSampleFile(x))).toEqual(x);
    expect(parseSampleFile(JSON.stringify(toSampleFile(x)))).toEqual(x);
  });

  it("writes the documented shape: format, version, ISO times, aliases, big counters as strings, no tenant", () => {
    const doc = toSampleFile(sampleSet());
    expect(doc).toMatchObject({ format: "weir.samples", version: SAMPLE_FILE_VERSION, from: "2024-05-01T02:00:00.000Z", to: "2024-05-01T02:10:00.000Z" });
    expect(doc.windows[1]).toMatchObject({
      collector: "edge-2",
      windowStart: "2024-05-01T02:05:00.000Z",
      windowSeconds: 300,
      seen: 2,
      exact: { records: 2, bytes: "18446744073709552115", packets: 4 },
      provenance: { node: "node-a", weightAttribute: "bytes", updatedAt: "2024-05-01T02:10:00.000Z" },
    });
    expect(doc.windows[1].kept[0].record).toEqual({
      src: "198.51.100.9",
      dst: "203.0.113.80",
      sport: 49152,
      dport: 443,
      proto: 6,
      bytes: "18446744073709551615",
      packets: 3,
      start: T0 + 400_000,
      end: T0 + 402_000,
      ingressInterface: 3,
      bgpSourceAsNumber: 64496,
    });
    const priorities = doc.windows[0].kept.map((e) => e.priority);
    expect(priorities).toEqual([...priorities].sort((a, b) => b - a));
    expect(JSON.stringify(doc)).not.toMatch(/tenant/i);
  });

  it("rejects truncated JSON text at the document's root", () => {
    const text = JSON.stringify(toSampleFile(sampleSet()));
    const found = issues(text.slice(0, Math.floor(text.length / 2)));
    expect(found).toHaveLength(1);
    expect(found[0]).toMatch(/^: is not complete JSON text \(.+\)$/);
  });

  it("rejects a truncated document (a window without kept records) naming the path", () => {
    const doc = file();
    delete doc.windows[1].kept;
    expect(issues(doc)).toEqual([expect.stringMatching(/^windows\[1\]\.kept: /)]);
  });

  it("rejects another format or an unknown version with one message", () => {
    expect(issues({ ...file(), format: "weir.reservoir" })).toEqual(['format: must be "weir.samples": this is not a Weir sample file']);
    expect(issues({ ...file(), version: 2, windows: "changed in version 2" })).toEqual(["version: is not a version this Weir reads (it reads version 1)"]);
    expect(issues([])).toEqual([": a sample file must be a JSON object"]);
  });

  it("rejects a kept priority below τ", () => {
    const doc = file();
    doc.windows[0].kept[2].priority = doc.windows[0].tau / 2;
    expect(issues(doc)).toContainEqual(expect.stringMatching(/^windows\[0\]\.kept\[2\]\.priority: .* is below τ = /));
  });

  it("rejects more kept records than k", () => {
    const doc = file();
    doc.windows[0].k = 2;
    expect(issues(doc)).toEqual(["windows[0].kept: holds 3 records but k is 2"]);
  });

  it("rejects τ > 0 while fewer than k are kept, a priority below its weight, and fewer seen than kept", () => {
    const doc = file();
    doc.windows[1].tau = 1;
    doc.windows[0].kept[0].priority = doc.windows[0].kept[0].weight / 2;
    doc.windows[0].seen = 2;
    const found = issues(doc);
    expect(found).toContainEqual("windows[1].tau: must be 0 while fewer than k records are kept");
    expect(found).toContainEqual(expect.stringMatching(/^windows\[0\]\.kept\[0\]\.priority: .* is below its weight/));
    expect(found).toContainEqual("windows[0].seen: is 2, fewer than the 3 kept records");
  });

  it("rejects negative, fractional and rounded counters", () => {
    const doc = file();
    doc.windows[0].exact.bytes = -1;
    doc.windows[0].exact.packets = "-5";
    doc.windows[1].exact.packets = 1.5;
    doc.windows[1].exact.bytes = 2 ** 53 + 2;
    const found = issues(doc);
    expect(found).toEqual([
      "windows[0].exact.bytes: must be a non-negative whole number (a decimal string above 2^53 − 1), not -1",
      'windows[0].exact.packets: must be a non-negative whole number (a decimal string above 2^53 − 1), not "-5"',
      "windows[1].exact.bytes: must be a non-negative whole number (a decimal string above 2^53 − 1), not 9007199254740994",
      "windows[1].exact.packets: must be a non-negative whole number (a decimal string above 2^53 − 1), not 1.5",
    ]);
  });

  it("rejects exact counters that disagree with the sample", () => {
    const doc = file();
    doc.windows[0].exact.records = 4;
    doc.windows[1].exact.packets = 1;
    expect(issues(doc)).toEqual([
      "windows[0].exact.records: is 4, but seen is 5: both count every record offered to the sample",
      "windows[1].exact.packets: is 1, less than the 4 packets of the kept records alone",
    ]);
  });

  it("rejects a windowStart not aligned to windowSeconds, naming the aligned start", () => {
    const doc = file();
    doc.windows[0].windowStart = "2024-05-01T02:01:00.000Z";
    expect(issues(doc)).toContainEqual(
      "windows[0].windowStart: is not a multiple of windowSeconds (300 s) since 1970-01-01T00:00:00Z; the window holding it starts at 2024-05-01T02:00:00.000Z",
    );
    const other = file();
    other.windows[0].windowStart = "2024-05-01 02:00";
    expect(issues(other)).toEqual(['windows[0].windowStart: must be an ISO 8601 UTC time such as 2024-05-01T02:00:00Z, not "2024-05-01 02:00"']);
  });

  it("rejects an invalid flow record inside with the record's own message", () => {
    const doc = file();
    doc.windows[0].kept[1].record.bytes = 0;
    const own = parseFlowRecord(doc.windows[0].kept[1].record);
    expect(own.ok).toBe(false);
    if (own.ok) return;
    expect(issues(doc)).toContainEqual(`windows[0].kept[1].record: bytes: ${own.issues[0].message}`);

    const typo = file();
    typo.windows[1].kept[0].record.dprot = 443;
    expect(issues(typo)).toEqual([expect.stringMatching(/^windows\[1\]\.kept\[0\]\.record: dprot: is neither a Weir field nor an IPFIX information element name .*did you mean dport\?$/)]);
  });

  it("rejects a weight that is not the record's counter, a record outside its window, a window outside [from, to), a repeated window", () => {
    const weight = file();
    weight.windows[1].kept[1].weight = 499;
    weight.windows[1].kept[1].priority = 2000;
    expect(issues(weight)).toEqual(["windows[1].kept[1].weight: is 499, but the record's bytes is 500 (provenance.weightAttribute)"]);

    const outside = file();
    outside.windows[1].kept[1].record.start = T0 + 10 * 60_000;
    outside.windows[1].kept[1].record.end = T0 + 10 * 60_000;
    expect(issues(outside)).toEqual(["windows[1].kept[1].record.start: 2024-05-01T02:10:00.000Z lies outside the window 2024-05-01T02:05:00.000Z + 300 s"]);

    const range = file();
    range.to = "2024-05-01T02:05:00.000Z";
    expect(issues(range)).toEqual(["windows[1].windowStart: lies outside [from, to): the file holds the windows that start in that range"]);

    const repeated = file();
    repeated.windows.push(repeated.windows[0]);
    expect(issues(repeated)).toEqual(["windows[2]: repeats windows[0] (same collector, windowStart, windowSeconds and node)"]);
    // The same window of another node is a different reservoir, and welcome.
    const otherNode = file();
    otherNode.windows.push({ ...otherNode.windows[0], provenance: { ...otherNode.windows[0].provenance, node: "node-b" } });
    expect(parseSampleFile(otherNode).windows).toHaveLength(3);
  });

  it("rejects unknown fields, to before from, and a wrong provenance", () => {
    const doc = file();
    (doc as any).tenantId = 7;
    doc.windows[0].provenance.weightAttribute = "flows";
    expect(issues(doc)).toEqual([
      'windows[0].provenance.weightAttribute: must be "bytes" or "packets"',
      "tenantId: is not a field of a version 1 sample file",
    ]);
    const backwards = { ...file(), from: "2024-05-01T03:00:00Z", windows: [] };
    expect(issues(backwards)).toEqual(["to: must be after from (2024-05-01T03:00:00.000Z)"]);
  });
});
