import { afterAll, beforeAll, describe, expect, it } from "vitest";
import type { EstimateAnswer } from "~/query/answer";
import { postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";

// rank over HTTP: GET and POST /api/v1/estimate take rank=estimate|split with a group-by and
// say how the groups were chosen; anything else is a 400 naming the field. The numbers
// themselves are checked against the method in selection.test.ts.

const T0 = Date.UTC(2024, 4, 1, 2, 0);
const FROM = new Date(T0).toISOString();
const TO = new Date(T0 + 2 * 300_000).toISOString();

/** 400 invented flows to 12 ports, documentation addresses (RFC 5737), sizes over three orders of magnitude. */
function records() {
  return Array.from({ length: 400 }, (_, i) => ({
    src: `198.51.100.${i % 256}`,
    dst: `203.0.113.${(i * 7) % 256}`,
    sport: 1024 + i,
    dport: 8000 + (i % 12),
    proto: 6,
    bytes: 40 + ((i * 7919) % 100_000),
    packets: 1 + (i % 50),
    start: T0 + (i % 2) * 300_000 + i,
  }));
}

describe("rank in /api/v1/estimate", () => {
  let t: TestServer;
  let key: string;
  beforeAll(async () => {
    t = await startTestServer();
    key = (await tenantWithKey(t.server, "riverline", { scope: "both", sampleSize: 32 })).key;
    const res = await postFlows(t.url, key, JSON.stringify(records()));
    expect(res.status).toBe(200);
  });
  afterAll(() => t?.close());

  const get = async (search: string) => {
    const res = await fetch(`${t.url}/api/v1/estimate?${search}`, { headers: { authorization: `Bearer ${key}` } });
    return { status: res.status, body: await res.json() };
  };

  it("rank=split by GET and POST: the same answer, the halves named, and a Bonferroni interval per group over the 12 groups ranked", async () => {
    const viaGet = await get(`from=${FROM}&to=${TO}&groupBy=dport&top=5&rank=split`);
    const viaPost = await fetch(`${t.url}/api/v1/estimate`, {
      method: "POST",
      headers: { authorization: `Bearer ${key}`, "content-type": "application/json" },
      body: JSON.stringify({ from: FROM, to: TO, groupBy: "dport", top: 5, rank: "split" }),
    });
    expect(viaGet.status).toBe(200);
    expect(await viaPost.json()).toEqual(viaGet.body);
    const a = viaGet.body as EstimateAnswer;
    expect(a.selection).toMatchObject({ rankedBy: "split", groupsRanked: 12, halves: { rankedOn: "A", estimatedOn: "B" } });
    expect(a.groups).toHaveLength(5);
    for (const g of a.groups) {
      // Bonferroni over m = 12: never narrower than the group's own 95% interval.
      expect(g.ci95Simultaneous![0]).toBeLessThanOrEqual(g.ci95[0]);
      expect(g.ci95Simultaneous![1]).toBeGreaterThanOrEqual(g.ci95[1]);
    }
  });

  it("without rank the plain ranking is disclosed: the note says the top groups tend to be overstated", async () => {
    const { status, body } = await get(`from=${FROM}&to=${TO}&groupBy=dport&top=5`);
    expect(status).toBe(200);
    expect(body.selection.rankedBy).toBe("estimate");
    expect(body.selection.groupsRanked).toBe(12);
    expect(body.selection.note).toMatch(/overstated \(the winner's curse\)/);
    // No group-by, no selection.
    expect((await get(`from=${FROM}&to=${TO}`)).body.selection).toBeUndefined();
  });

  it("refuses an unknown rank and rank without a group-by with a 400 that names the field", async () => {
    const bad = await get(`from=${FROM}&to=${TO}&groupBy=dport&rank=best`);
    expect(bad.status).toBe(400);
    expect(bad.body.error.code).toBe("invalid_query");
    expect(bad.body.error.details).toEqual([{ path: "rank", message: "must be one of estimate, split (split: rank on one half of the kept records, estimate on the other)" }]);
    const alone = await get(`from=${FROM}&to=${TO}&rank=split`);
    expect(alone.status).toBe(400);
    expect(alone.body.error.details).toEqual([{ path: "rank", message: "applies only with groupBy: it says how the top groups are chosen" }]);
  });
});
