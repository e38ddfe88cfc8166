import { describe, expect, it } from "vitest";
import { collectorRule, overlapsOf, sourcesOf, type CollectorInfo } from "~/query/collector-rule";

// Which named collectors may be summed in one answer. Summing priority samples is unbiased only
// over disjoint record streams (N. Duffield, C. Lund, M. Thorup, "Priority sampling for
// estimation of arbitrary subset sums", J. ACM 54(6), 2007, the merge and sum of samples), so
// two collectors that hold samples of the same records must not be named together unasked: a
// merge with an input, a copy (imported sample files) with the collector it came from, two
// copies of one origin, and the same through copies of copies or merges of copies.

const KNOWN: CollectorInfo[] = [
  { name: "north-archive", kind: "copy", of: ["pop-north"] },
  { name: "north-archive-2", kind: "copy", of: ["pop-north"] },
  { name: "archive-of-archive", kind: "copy", of: ["north-archive"] },
  { name: "all-pops", kind: "merge", of: ["pop-north", "pop-south"] },
  { name: "south-merge", kind: "merge", of: ["pop-south", "pop-east"] },
  { name: "copies-merged", kind: "merge", of: ["north-archive", "site-b-copy"] },
  { name: "site-b-copy", kind: "copy", of: ["site-b"] },
];

const pairs = (chosen: string[]) => overlapsOf(chosen, KNOWN).map((o) => [o.code, ...o.collectors, o.shared]);

describe("overlapsOf", () => {
  it("finds a copy with its origin, two copies of one origin, and chains through copies and merges", () => {
    expect(pairs(["pop-north", "north-archive"])).toEqual([["copy_with_origin", "pop-north", "north-archive", "pop-north"]]);
    expect(pairs(["north-archive", "north-archive-2"])).toEqual([["copy_with_origin", "north-archive", "north-archive-2", "pop-north"]]);
    // A copy of a copy still holds the first origin's records.
    expect(pairs(["archive-of-archive", "pop-north"])).toEqual([["copy_with_origin", "archive-of-archive", "pop-north", "pop-north"]]);
    // A merge of pop-north and a copy of pop-north.
    expect(pairs(["all-pops", "north-archive"])).toEqual([["copy_with_origin", "all-pops", "north-archive", "pop-north"]]);
    // A merge that took a copy holds its origin's records too.
    expect(pairs(["copies-merged", "site-b"])).toEqual([["copy_with_origin", "copies-merged", "site-b", "site-b"]]);
  });

  it("keeps the merge rule's code for merges of plain streams", () => {
    expect(pairs(["all-pops", "pop-south"])).toEqual([["overlapping_collectors", "all-pops", "pop-south", "pop-south"]]);
    expect(pairs(["all-pops", "south-merge"])).toEqual([["overlapping_collectors", "all-pops", "south-merge", "pop-south"]]);
  });

  it("accepts collectors that hold disjoint records, and any single collector", () => {
    expect(pairs(["pop-north", "pop-south"])).toEqual([]);
    expect(pairs(["north-archive", "pop-south", "site-b"])).toEqual([]);
    expect(pairs(["all-pops", "pop-east"])).toEqual([]);
    expect(pairs(["north-archive"])).toEqual([]);
    expect(pairs([])).toEqual([]);
  });

  it("says in words which collector holds whose records", () => {
    const [o] = overlapsOf(["pop-north", "north-archive"], KNOWN);
    expect(o.message).toBe("north-archive (copy of pop-north) holds a sample of pop-north's records, so naming both counts them twice");
    const [two] = overlapsOf(["north-archive", "north-archive-2"], KNOWN);
    expect(two.message).toMatch(/both hold a sample of pop-north's records/);
  });

  it("survives a copy named after itself or a cycle", () => {
    const odd: CollectorInfo[] = [
      { name: "site-b", kind: "copy", of: ["site-b"] },
      { name: "a", kind: "copy", of: ["b"] },
      { name: "b", kind: "copy", of: ["a"] },
    ];
    expect([...sourcesOf("a", new Map(odd.map((c) => [c.name, c])))].sort()).toEqual(["a", "b"]);
    expect(overlapsOf(["site-b", "x"], odd)).toEqual([]);
  });
});

describe("collectorRule (the answer's statement of the rule)", () => {
  it("with no collector named: every stream collector, copies and merges in range listed as left out with their reason", () => {
    const rule = collectorRule([], [KNOWN[0], KNOWN[3]], []);
    expect(rule.rule).toBe("every-stream");
    expect(rule.excluded.map((e) => [e.collector, e.kind, e.of])).toEqual([
      ["north-archive", "copy", ["pop-north"]],
      ["all-pops", "merge", ["pop-north", "pop-south"]],
    ]);
    expect(rule.text).toBe(
      "No collector named: every stream collector counts; left out: north-archive (copy of pop-north), all-pops (merge of pop-north, pop-south) — they count only when named.",
    );
  });

  it("names the overlap when it was allowed, and says nothing more when the named collectors are disjoint", () => {
    const overlaps = overlapsOf(["pop-north", "north-archive"], KNOWN);
    const allowed = collectorRule(["pop-north", "north-archive"], [], overlaps);
    expect(allowed.rule).toBe("overlap-allowed");
    expect(allowed.text).toMatch(/^Named collectors counted together on request \(allowOverlap\): north-archive \(copy of pop-north\) holds/);
    expect(collectorRule(["pop-north", "pop-south"], [], []).rule).toBe("named");
  });
});
