import fc from "fast-check";
import { describe, expect, it } from "vitest";
import { mergeStates } from "~/sampling/merge";
import { Reservoir, type ReservoirState } from "~/sampling/reservoir";

// Merge rule of a priority sample (Duffield, Lund, Thorup, J. ACM 54(6), 2007):
// the sample of a union of disjoint streams is determined by the priorities, so
// merging per-stream reservoirs with the same u_i must give exactly the reservoir
// of the union stream — same kept set, same τ.

const stream = fc.array(
  fc.record({ w: fc.integer({ min: 1, max: 1_000_000 }), u: fc.double({ min: 1e-6, max: 1, noNaN: true }) }),
  { maxLength: 120 },
);

function build(records: { id: number; w: number; u: number }[], k: number): ReservoirState<number> {
  const r = new Reservoir<number>(k);
  for (const rec of records) r.offer(rec.id, rec.w, rec.u);
  return r.state();
}

const ids = (s: ReservoirState<number>) => s.kept.map((e) => e.item).sort((a, b) => a - b);
const distinctPriorities = (records: { w: number; u: number }[]) => new Set(records.map((r) => r.w / r.u)).size === records.length;

describe("mergeStates", () => {
  it("merging disjoint streams equals sampling their union with the same draws (property)", () => {
    fc.assert(
      fc.property(
        fc.array(fc.tuple(stream, fc.integer({ min: 1, max: 30 })), { minLength: 1, maxLength: 5 }),
        fc.option(fc.integer({ min: 1, max: 30 }), { nil: undefined }),
        (parts, kWanted) => {
          let next = 0;
          const labelled = parts.map(([records, k]) => ({ k, records: records.map((r) => ({ ...r, id: next++ })) }));
          const all = labelled.flatMap((p) => p.records);
          fc.pre(distinctPriorities(all));
          const merged = mergeStates(labelled.map((p) => build(p.records, p.k)), kWanted);
          const km = Math.min(kWanted ?? Infinity, ...labelled.map((p) => p.k));
          const direct = build(all, km);
          expect(merged.k).toBe(km);
          expect(ids(merged)).toEqual(ids(direct));
          expect(merged.tau).toBe(direct.tau);
          expect(merged.seen).toBe(all.length);
        },
      ),
      { numRuns: 300 },
    );
  });

  it("is associative: merging merges equals merging everything at once", () => {
    fc.assert(
      fc.property(stream, stream, stream, fc.integer({ min: 1, max: 20 }), (a, b, c, k) => {
        let next = 0;
        const [ra, rb, rc] = [a, b, c].map((s) => build(s.map((r) => ({ ...r, id: next++ })), k));
        fc.pre(distinctPriorities([...a, ...b, ...c]));
        const once = mergeStates([ra, rb, rc]);
        const twice = mergeStates([mergeStates([ra, rb]), rc]);
        expect(ids(twice)).toEqual(ids(once));
        expect(twice.tau).toBe(once.tau);
      }),
    );
  });

  it("matches the worked example in its documentation", () => {
    const a = { k: 2, tau: 3, seen: 3, kept: [{ item: "a", weight: 8, priority: 9 }, { item: "b", weight: 4, priority: 5 }] };
    const b = { k: 2, tau: 0, seen: 1, kept: [{ item: "c", weight: 6, priority: 7 }] };
    const m = mergeStates([a, b]);
    expect(m.tau).toBe(5);
    expect(m.kept.map((e) => e.item)).toEqual(["a", "c"]);
    expect(m.seen).toBe(4);
  });

  it("refuses an empty input list and a non-positive sample size", () => {
    expect(() => mergeStates([])).toThrow(/at least one/);
    expect(() => mergeStates([{ k: 2, tau: 0, seen: 0, kept: [] }], 0)).toThrow(/positive integer/);
  });
});
