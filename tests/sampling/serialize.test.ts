import fc from "fast-check";
import { describe, expect, it } from "vitest";
import { Reservoir } from "~/sampling/reservoir";
import { ReservoirJsonError, reservoirFromJson, reservoirToJson } from "~/sampling/serialize";

const encode = (n: number) => ({ id: n });
const decode = (j: unknown) => {
  const id = (j as { id?: unknown }).id;
  if (typeof id !== "number") throw new Error("id must be a number");
  return id;
};

describe("the versioned JSON form of a reservoir", () => {
  it("round-trips exactly through JSON text (ECMA-262 shortest round-trip number form)", () => {
    fc.assert(
      fc.property(
        fc.array(fc.record({ w: fc.double({ min: 1e-3, max: 1e15, noNaN: true }), u: fc.double({ min: 1e-12, max: 1, noNaN: true }) }), { maxLength: 80 }),
        fc.integer({ min: 1, max: 25 }),
        (records, k) => {
          const r = new Reservoir<number>(k);
          records.forEach((rec, i) => r.offer(i, rec.w, rec.u));
          const text = JSON.stringify(reservoirToJson(r.state(), encode));
          expect(reservoirFromJson(JSON.parse(text), decode)).toEqual(r.state());
        },
      ),
    );
  });

  const valid = () => ({
    format: "weir.reservoir",
    version: 1,
    k: 2,
    tau: 5,
    seen: 3,
    kept: [
      { priority: 9, weight: 8, record: { id: 1 } },
      { priority: 7, weight: 6, record: { id: 2 } },
    ],
  });

  it("accepts a consistent document", () => {
    expect(reservoirFromJson(valid(), decode).kept).toHaveLength(2);
  });

  const broken: [string, (d: ReturnType<typeof valid>) => unknown, RegExp][] = [
    ["another version", (d) => ({ ...d, version: 2 }), /version/],
    ["not a reservoir", (d) => ({ ...d, format: "other" }), /format/],
    ["more kept records than k", (d) => ({ ...d, k: 1 }), /holds 2 records but k is 1/],
    ["a kept priority below τ", (d) => ({ ...d, tau: 8 }), /below τ/],
    ["a priority below its weight (u > 1)", (d) => ({ ...d, kept: [{ priority: 5, weight: 8, record: { id: 1 } }, d.kept[1]] }), /below its weight/],
    ["τ > 0 with fewer than k kept", (d) => ({ ...d, kept: [d.kept[0]] }), /tau/],
    ["a negative weight", (d) => ({ ...d, kept: [{ priority: 9, weight: -1, record: {} }, d.kept[1]] }), /kept\.0\.weight/],
    ["fewer seen than kept", (d) => ({ ...d, seen: 1 }), /seen/],
    ["a record the decoder refuses", (d) => ({ ...d, kept: [d.kept[0], { priority: 7, weight: 6, record: { id: "x" } }] }), /kept\.1\.record: id must be a number/],
    ["truncated (no kept list)", ({ kept: _kept, ...rest }) => rest, /kept/],
  ];
  for (const [name, mutate, message] of broken) {
    it(`rejects ${name} with a message naming the path`, () => {
      expect(() => reservoirFromJson(mutate(valid()), decode)).toThrow(ReservoirJsonError);
      expect(() => reservoirFromJson(mutate(valid()), decode)).toThrow(message);
    });
  }
});
