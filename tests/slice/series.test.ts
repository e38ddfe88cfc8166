import { describe, expect, test } from "vitest";
import type { GroupJson } from "~/query/answer";
import { buildSeries } from "~/slice/series";

const T0 = Date.UTC(2024, 4, 1, 2, 0);
const W = 300_000;
const group = (i: number, estimate: number): GroupJson => ({
  key: new Date(T0 + i * W).toISOString(),
  estimate,
  stdError: estimate / 10,
  ci95: [estimate * 0.8, estimate * 1.2],
  kept: 20,
  rough: false,
  method: "normal",
  roughReason: null,
  matched: true,
});

describe("the per-window series", () => {
  test("fills the tenant's window grid, with 0 where no kept record matched (the estimator sums kept records only, DLT 2007)", () => {
    const s = buildSeries({ groups: [group(2, 50), group(0, 10)], from: new Date(T0).toISOString(), to: new Date(T0 + 4 * W).toISOString(), windows: 4 }, 300);
    expect(s.truncated).toBe(false);
    expect(s.points.map((p) => [p.start, p.estimate])).toEqual([
      [T0, 10],
      [T0 + W, 0],
      [T0 + 2 * W, 50],
      [T0 + 3 * W, 0],
    ]);
    expect(s.points[2]).toMatchObject({ low: 40, high: 60 });
  });

  test("leaves gaps, not zeros, where the answer was cut at 1000 groups", () => {
    const groups = Array.from({ length: 1000 }, (_, i) => group(i * 2, 100 + i));
    const s = buildSeries({ groups, from: new Date(T0).toISOString(), to: new Date(T0 + 2000 * W).toISOString(), windows: 2000 }, 300);
    expect(s.truncated).toBe(true);
    expect(s.points).toHaveLength(2000);
    expect(s.points[1]).toEqual({ start: T0 + W, estimate: null, low: null, high: null, rough: false });
  });

  test("keeps windows of another length (a changed tenant setting) at their own starts", () => {
    const odd = { ...group(0, 7), key: new Date(T0 + 60_000).toISOString() };
    const s = buildSeries({ groups: [odd], from: new Date(T0).toISOString(), to: new Date(T0 + W).toISOString(), windows: 1 }, 300);
    expect(s.points.map((p) => p.start)).toEqual([T0, T0 + 60_000]);
  });

  test("steps by the hour where hourly roll-ups answered, with 0 for an hour without a match", () => {
    const H = 3_600_000;
    const hour = (i: number, estimate: number): GroupJson => ({ ...group(0, estimate), key: new Date(T0 + i * H).toISOString() });
    const answer = {
      groups: [hour(0, 600), group(24, 40)],
      from: new Date(T0).toISOString(),
      to: new Date(T0 + 2 * H + 2 * W).toISOString(),
      windows: 2,
      resolution: [
        { windowSeconds: 3600, windows: 1, from: new Date(T0).toISOString(), to: new Date(T0 + 2 * H).toISOString() },
        { windowSeconds: 300, windows: 1, from: new Date(T0 + 2 * H).toISOString(), to: new Date(T0 + 2 * H + W).toISOString() },
      ],
    };
    expect(buildSeries(answer, 300).points.map((p) => [p.start, p.estimate])).toEqual([
      [T0, 600],
      [T0 + H, 0],
      [T0 + 2 * H, 40],
      [T0 + 2 * H + W, 0],
    ]);
  });

  test("leaves a gap, not zeros, between the range start and the first hourly window when the hour holding it was left out", () => {
    const H = 3_600_000;
    const from = T0 + 4 * W; // 02:20: the hourly window of 02:00 starts before it, so it is not in the answer
    const answer = {
      groups: [{ ...group(0, 600), key: new Date(T0 + H).toISOString() }],
      from: new Date(from).toISOString(),
      to: new Date(T0 + 2 * H).toISOString(),
      windows: 1,
      resolution: [{ windowSeconds: 3600, windows: 1, from: new Date(T0 + H).toISOString(), to: new Date(T0 + 2 * H).toISOString() }],
    };
    const points = buildSeries(answer, 300).points;
    expect(points.filter((p) => p.start < T0 + H).every((p) => p.estimate === null)).toBe(true);
    expect(points.filter((p) => p.start < T0 + H)).toHaveLength(8); // 02:20 … 02:55
    expect(points.find((p) => p.start === T0 + H)?.estimate).toBe(600);
  });
});
