import { afterAll, beforeAll, describe, expect, it } from "vitest";
import type { EstimateAnswer } from "~/query/answer";
import { MEASURED_WIDENING, rollUpDisclosure } from "~/query/rollup-disclosure";
import { runRetention } from "~/retention/rollup.server";
import { seededUniform } from "~/sampling/uniform";
import { postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";

// The roll-up disclosure in the answer's `resolution`: hourly windows rolled up from fine ones
// state how much wider intervals get. The bound ratio is √(n·(k−1)/(K−1)), from the variance
// bound W²/(k−1) of a priority sample's total (Szegedy, STOC 2006) with n equal fine windows.

const HOUR = Date.UTC(2026, 0, 5, 2, 0);
// Documentation addresses (RFC 5737); heavy-ish sizes so every window passes k.
const flowsAt = (start: number, n: number) =>
  Array.from({ length: n }, (_, i) => ({ src: `192.0.2.${i % 250}`, dst: "198.51.100.7", proto: 6, dport: 443, bytes: 100 + ((i * 7919) % 5000), packets: 1 + (i % 4), start }));

describe("roll-up disclosure", () => {
  it("computes the bound ratio by hand", () => {
    // n = 12 five-minute windows of k = 64 into K = 64: √(12·63/63) = √12.
    expect(rollUpDisclosure([{ k: 64, windowSeconds: 3600 }], { sampleSize: 64, windowSeconds: 300 })!.boundRatio).toBeCloseTo(Math.sqrt(12), 12);
    // K = 256: √(12·63/255).
    expect(rollUpDisclosure([{ k: 256, windowSeconds: 3600 }], { sampleSize: 64, windowSeconds: 300 })!.boundRatio).toBeCloseTo(Math.sqrt((12 * 63) / 255), 12);
    // No hourly window, or a tenant whose own windows are hourly: nothing to disclose.
    expect(rollUpDisclosure([{ k: 64, windowSeconds: 300 }], { sampleSize: 64, windowSeconds: 300 })).toBeNull();
    expect(rollUpDisclosure([{ k: 64, windowSeconds: 3600 }], { sampleSize: 64, windowSeconds: 3600 })).toBeNull();
  });

  let t: TestServer;
  beforeAll(async () => {
    t = await startTestServer({ uniform: seededUniform(2006), env: { RETENTION_INTERVAL_MINUTES: "0" } });
  });
  afterAll(() => t?.close());

  it("is present in answers that read hourly windows, with the measured figure, and absent before the roll-up", async () => {
    const made = await tenantWithKey(t.server, "riverline-disclosure", { sampleSize: 64, windowSeconds: 300 });
    for (let w = 0; w < 12; w++) expect((await postFlows(t.url, made.key, JSON.stringify(flowsAt(HOUR + w * 300_000, 150)))).status).toBe(200);
    const ask = async (): Promise<EstimateAnswer> => {
      const res = await fetch(`${t.url}/api/v1/estimate`, {
        method: "POST",
        headers: { authorization: `Bearer ${made.key}`, "content-type": "application/json" },
        body: JSON.stringify({ from: HOUR, to: HOUR + 3600_000 }),
      });
      expect(res.status).toBe(200);
      return (await res.json()) as EstimateAnswer;
    };
    const before = await ask();
    expect(before.resolution.map((r) => [r.windowSeconds, r.rollUp])).toEqual([[300, undefined]]);

    await runRetention({ db: t.server.db, manager: t.server.manager, node: t.server.env.NODE_ID }, HOUR + 40 * 86_400_000, { tenant: "riverline-disclosure" });
    const after = await ask();
    expect(after.resolution).toHaveLength(1);
    const [hourly] = after.resolution;
    expect(hourly.windowSeconds).toBe(3600);
    expect(hourly.rollUp!.boundRatio).toBeCloseTo(Math.sqrt(12), 12);
    expect(hourly.rollUp!.measured).toEqual(MEASURED_WIDENING);
    expect(hourly.rollUp!.note).toMatch(/^Every interval over hourly roll-ups is wider than over 5-minute windows, not only small subsets'/);
    // The same question's standard error did widen (the benchmark measures by how much).
    expect(after.stdError).toBeGreaterThan(before.stdError);
  });
});
