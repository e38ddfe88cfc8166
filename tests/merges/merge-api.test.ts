import { afterAll, beforeAll, describe, expect, it } from "vitest";
import type { Tenant } from "~/db/schema.server";
import { parseFlowRecord, type FlowRecord } from "~/flow/record";
import { ReservoirManager } from "~/ingest/manager.server";
import type { EstimateAnswer } from "~/query/answer";
import type { MergeAnswer } from "~/merges/answer";
import { mergeStates } from "~/sampling/merge";
import { Reservoir } from "~/sampling/reservoir";
import { seededUniform } from "~/sampling/uniform";
import { ensureCollector } from "~/tenants.server";
import { keyFor, postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";
import { dltMerge, flows, storedReservoirs, WINDOW_MS, type FlowJson } from "./helpers";

// POST and DELETE /api/v1/merge against a real server (temporary SQLite file). Two stream
// collectors see disjoint invented flows in three windows, one of them also on a second
// node; every u_i comes from a seeded source, so the test can replay the draws. A merged
// window must be exactly the priority sample one reservoir over the union of the inputs'
// records would have kept (Duffield, Lund, Thorup, J. ACM 54(6), 2007, merge of priority
// samples of disjoint streams), and its exact counters the sums of the inputs'.

const T0 = Date.UTC(2024, 4, 1, 2, 0);
const FROM = new Date(T0).toISOString();
const TO = new Date(T0 + 3 * WINDOW_MS).toISOString();
const K = 32;
const SERVER_SEED = 2007;
const NODE_B_SEED = 4632;

interface Drawn {
  windowStart: number;
  weight: number;
  u: number;
}

describe("POST and DELETE /api/v1/merge", () => {
  let t: TestServer;
  let nodeB: ReservoirManager;
  let carrier: Tenant;
  let queryKey: string;
  let queryPrefix: string;
  let ingestKey: string;
  const drawn: Drawn[] = [];
  const sent = new Map<string, FlowJson[]>();
  const serverU = seededUniform(SERVER_SEED);
  const nodeBU = seededUniform(NODE_B_SEED);

  const sql = async (q: string, args: (string | number)[] = []) => (await t.server.db.$client.execute({ sql: q, args })).rows;

  function post(body: unknown, key: string | null = queryKey, init: RequestInit = {}): Promise<Response> {
    return fetch(`${t.url}/api/v1/merge`, {
      method: "POST",
      headers: { "content-type": "application/json", ...(key === null ? {} : { authorization: `Bearer ${key}` }) },
      body: typeof body === "string" ? body : JSON.stringify(body),
      ...init,
    });
  }

  async function estimate(search: string): Promise<Response> {
    return fetch(`${t.url}/api/v1/estimate?from=${FROM}&to=${TO}${search}`, { headers: { authorization: `Bearer ${queryKey}` } });
  }

  /** Sends one batch through the server (node-a); each batch lies in one window, so the draws follow the records' order. */
  async function sendServer(key: string, collector: string, records: FlowJson[]): Promise<void> {
    const res = await postFlows(t.url, key, JSON.stringify(records));
    expect(res.status, await res.clone().text()).toBe(200);
    for (const r of records) drawn.push({ windowStart: r.start - (r.start % WINDOW_MS), weight: r.bytes, u: serverU() });
    sent.set(collector, [...(sent.get(collector) ?? []), ...records]);
  }

  beforeAll(async () => {
    t = await startTestServer({ env: { NODE_ID: "node-a" }, uniform: seededUniform(SERVER_SEED) });
    // A second node writing to the same store, as two Weir nodes behind a load balancer would.
    nodeB = new ReservoirManager(t.server.db, { node: "node-b", uniform: seededUniform(NODE_B_SEED) });
    const made = await tenantWithKey(t.server, "carrier", { collector: "pop-west", scope: "query", sampleSize: K });
    carrier = made.tenant as Tenant;
    queryKey = made.key;
    queryPrefix = made.prefix;
    ingestKey = (await keyFor(t.server, carrier.id, "pop-west", "ingest")).key;
    const eastKey = (await keyFor(t.server, carrier.id, "pop-east", "ingest")).key;
    await ensureCollector(t.server.db, carrier.id, "lab-tap");

    await sendServer(ingestKey, "pop-west", flows(1, 120, T0, "198.51.100"));
    await sendServer(eastKey, "pop-east", flows(2, 90, T0, "203.0.113"));
    await sendServer(ingestKey, "pop-west", flows(3, 70, T0 + WINDOW_MS, "198.51.100"));
    await sendServer(eastKey, "pop-east", flows(4, 20, T0 + WINDOW_MS, "203.0.113")); // fewer than k: τ = 0
    await sendServer(ingestKey, "pop-west", flows(5, 100, T0 + 2 * WINDOW_MS, "198.51.100"));
    // pop-east on node-b in the first window: its own reservoir, merged like any other input.
    const onB = flows(6, 60, T0, "192.0.2");
    const records = onB.map((r) => {
      const parsed = parseFlowRecord(r);
      if (!parsed.ok) throw new Error("invented record invalid");
      return parsed.record as FlowRecord;
    });
    const east = await ensureCollector(t.server.db, carrier.id, "pop-east");
    await nodeB.ingest({ tenant: { ...carrier, coordinationKey: null }, collector: east, records, receivedAt: T0 });
    for (const r of onB) drawn.push({ windowStart: T0, weight: r.bytes, u: nodeBU() });
    sent.set("pop-east", [...sent.get("pop-east")!, ...onB]);
  });

  afterAll(async () => {
    await nodeB?.idle();
    await t?.close();
  });

  describe("validation", () => {
    it("needs an API key with the query scope", async () => {
      expect((await post({ name: "m", collectors: ["pop-west"], from: FROM, to: TO }, null)).status).toBe(401);
      const res = await post({ name: "m", collectors: ["pop-west"], from: FROM, to: TO }, ingestKey);
      expect(res.status).toBe(403);
      expect((await res.json()).error.message).toContain("'query'");
    });

    it("answers 400 for a body that is not JSON, and 413 past the body limit", async () => {
      const res = await post("{ name: ");
      expect(res.status).toBe(400);
      const body = await res.json();
      expect(body.error.code).toBe("invalid_json");
      expect(body.error.details[0].path).toBe("");
      const huge = await post({ name: "m", collectors: ["pop-west"], from: FROM, to: TO, pad: "x".repeat(70_000) });
      expect(huge.status).toBe(413);
    });

    it("answers 400 naming every field that is wrong", async () => {
      const res = await post({ name: "not a name!", collectors: [], from: "2024-05-01T02:00", to: 12, sampleSize: 8, preview: "yes", colour: "red" });
      expect(res.status).toBe(400);
      const { error } = await res.json();
      expect(error.code).toBe("invalid_request");
      const paths = error.details.map((d: { path: string }) => d.path).sort();
      expect(paths).toEqual(["collectors", "colour", "from", "name", "preview", "sampleSize"]);
      // A time without an offset is ambiguous (RFC 3339 §4.4); RFC 3339 §5.6 also requires seconds.
      expect(error.details.find((d: { path: string }) => d.path === "from").message).toContain("needs seconds and an offset");
      expect(error.details.find((d: { path: string }) => d.path === "sampleSize").message).toBe("must be at least 16");
    });

    it("answers 400 for to before from, a range over 400 days, duplicate and too many collectors", async () => {
      const backwards = await (await post({ name: "m", collectors: ["pop-west"], from: TO, to: FROM })).json();
      expect(backwards.error.details).toEqual([{ path: "to", message: `must be after from (${TO})` }]);
      const long = await (await post({ name: "m", collectors: ["pop-west"], from: "2023-01-01T00:00:00Z", to: "2024-03-01T00:00:00Z" })).json();
      expect(long.error.details[0].message).toContain("at most 400 days");
      const twice = await (await post({ name: "m", collectors: ["pop-west", "pop-east", "pop-west"], from: FROM, to: TO })).json();
      expect(twice.error.details).toEqual([{ path: "collectors[2]", message: "names pop-west twice; name each collector once" }]);
      // ISO 8601 writes years with four digits; a later time is refused, not a crash (ECMA-262 dates end at +275760).
      const farOff = await post({ name: "m", collectors: ["pop-west"], from: 8_700_000_000_000_001, to: 8_700_000_000_000_000 });
      expect(farOff.status).toBe(400);
      expect((await farOff.json()).error.details).toEqual([
        { path: "from", message: "must be before 10000-01-01T00:00:00Z" },
        { path: "to", message: "must be before 10000-01-01T00:00:00Z" },
      ]);
      const many = Array.from({ length: 51 }, (_, i) => `c${i}`);
      const tooMany = await post({ name: "m", collectors: many, from: FROM, to: TO });
      expect(tooMany.status).toBe(400);
      expect((await tooMany.json()).error.details[0]).toMatchObject({ path: "collectors" });
    });

    it("answers 422 naming each unknown collector", async () => {
      const res = await post({ name: "m", collectors: ["pop-west", "pop-north", "pop-south"], from: FROM, to: TO, preview: true });
      expect(res.status).toBe(422);
      const { error } = await res.json();
      expect(error.code).toBe("invalid_collectors");
      expect(error.details).toEqual([
        { path: "collectors[1]", message: "pop-north is not a collector of this tenant" },
        { path: "collectors[2]", message: "pop-south is not a collector of this tenant" },
      ]);
    });

    it("answers 405 for other methods and for GET", async () => {
      for (const method of ["GET", "PUT", "PATCH"]) {
        const res = await fetch(`${t.url}/api/v1/merge`, { method, headers: { authorization: `Bearer ${queryKey}` } });
        expect(res.status, method).toBe(405);
        expect(res.headers.get("allow")).toBe("POST, DELETE");
      }
    });

    it("previews an empty range as nothing, and refuses to create it (422, no collector left behind)", async () => {
      const empty = { name: "nothing-here", collectors: ["pop-west", "lab-tap"], from: "2024-06-01T00:00:00Z", to: "2024-06-02T00:00:00Z" };
      const preview = await post({ ...empty, preview: true });
      expect(preview.status).toBe(200);
      const answer = (await preview.json()) as MergeAnswer;
      expect(answer.totals).toEqual({ windows: 0, kept: 0, records: 0, duplicatesDropped: 0 });
      expect(answer.windows).toEqual([]);
      const create = await post(empty);
      expect(create.status).toBe(422);
      const { error } = await create.json();
      expect(error.code).toBe("nothing_to_merge");
      expect(error.message).toContain("nothing to merge");
      expect(await sql("SELECT id FROM collectors WHERE tenant_id = ? AND name = 'nothing-here'", [carrier.id])).toHaveLength(0);
    });
  });

  describe("a merge of disjoint streams", () => {
    let preview: MergeAnswer;
    let created: MergeAnswer;
    let before: number;
    let after: number;

    beforeAll(async () => {
      const body = { name: "all-pops", collectors: ["pop-west", "pop-east"], from: FROM, to: TO };
      const p = await post({ ...body, preview: true });
      expect(p.status, await p.clone().text()).toBe(200);
      preview = await p.json();
      expect(await sql("SELECT id FROM collectors WHERE tenant_id = ? AND name = 'all-pops'", [carrier.id])).toHaveLength(0);
      before = Date.now();
      const c = await post(body);
      after = Date.now();
      expect(c.status, await c.clone().text()).toBe(201);
      created = await c.json();
    });

    it("previews exactly what it then stores", async () => {
      expect(preview.preview).toBe(true);
      expect(preview.createdAt).toBeNull();
      expect(created.preview).toBe(false);
      expect(created.windows).toEqual(preview.windows);
      expect(created.totals).toEqual(preview.totals);
      expect(created).toMatchObject({ name: "all-pops", collectors: ["pop-west", "pop-east"], from: FROM, to: TO, sampleSize: K, coordinated: false, truncated: false });
      expect(created.createdBy).toBe(`key ${queryPrefix}`);
      expect(created.note).toContain("snapshot");

      const stored = await storedReservoirs(t.server.db.$client, carrier.id, "all-pops");
      expect(stored.map((s) => ({ windowStart: new Date(s.windowStart).toISOString(), windowSeconds: s.windowSeconds, k: s.k, tau: s.tau, kept: s.kept.length, records: s.records }))).toEqual(
        created.windows.map((w) => ({ windowStart: w.windowStart, windowSeconds: w.windowSeconds, k: w.k, tau: w.tau, kept: w.kept, records: w.records })),
      );
      // Stored under this node's id (NODE_ID).
      expect(new Set(stored.map((s) => s.node))).toEqual(new Set(["node-a"]));
      expect(created.windows.map((w) => w.inputs)).toEqual([3, 2, 1]);
      // Every window saw more than k records, so each merged sample is a real sample (τ > 0), not the whole stream.
      expect(created.windows.every((w) => w.tau > 0 && w.kept === K)).toBe(true);
    });

    it("stores per window the DLT 2007 merge of the stored inputs: the same kept priorities and τ as mergeStates", async () => {
      const west = await storedReservoirs(t.server.db.$client, carrier.id, "pop-west");
      const east = await storedReservoirs(t.server.db.$client, carrier.id, "pop-east");
      const merged = await storedReservoirs(t.server.db.$client, carrier.id, "all-pops");
      expect(merged).toHaveLength(3);
      for (const m of merged) {
        const inputs = [...west, ...east].filter((r) => r.windowStart === m.windowStart);
        // Duffield, Lund, Thorup (J. ACM 2007): the k_m highest priorities of the union, τ the (k_m+1)-th largest with every τ_j.
        const reference = dltMerge(inputs, K);
        expect(m.k).toBe(reference.k);
        expect(m.tau).toBe(reference.tau);
        expect(m.kept.map((e) => e.priority)).toEqual(reference.priorities);
        const library = mergeStates(
          inputs.map((r) => ({ k: r.k, tau: r.tau, seen: r.records, kept: r.kept.map((e) => ({ item: e.record, weight: e.weight, priority: e.priority })) })),
          K,
        );
        expect(m.tau).toBe(library.tau);
        expect(m.kept.map((e) => e.priority)).toEqual(library.kept.map((e) => e.priority));
        // The kept records themselves travel unchanged.
        expect(m.kept.map((e) => e.record)).toEqual(library.kept.map((e) => e.item));
        // Exact counters of the merge are the sums of the inputs' (disjoint streams).
        expect(m.records).toBe(inputs.reduce((n, r) => n + r.records, 0));
        expect(m.bytes).toBe(inputs.reduce((n, r) => n + r.bytes, 0n));
        expect(m.packets).toBe(inputs.reduce((n, r) => n + r.packets, 0n));
      }
    });

    it("is exactly the priority sample one reservoir over the union would have kept, with the same u_i (DLT 2007)", async () => {
      const merged = await storedReservoirs(t.server.db.$client, carrier.id, "all-pops");
      for (const m of merged) {
        const union = new Reservoir<number>(K);
        drawn.filter((d) => d.windowStart === m.windowStart).forEach((d, i) => union.offer(i, d.weight, d.u));
        expect(m.kept.map((e) => e.priority)).toEqual(union.kept().map((e) => e.priority));
        expect(m.tau).toBe(union.tau);
      }
      // The exact record count is what was sent.
      const sentCount = [...sent.values()].reduce((n, list) => n + list.length, 0);
      expect(created.totals.records).toBe(sentCount);
    });

    it("records the provenance (inputs, range, size, who, when) and a ledger entry", async () => {
      const [row] = await sql(
        "SELECT m.inputs, m.from_ms, m.to_ms, m.sample_size, m.coordinated, m.windows, m.kept, m.duplicates_dropped, m.created_by, m.created_at, c.kind " +
          "FROM merges m JOIN collectors c ON c.id = m.collector_id WHERE m.tenant_id = ? AND c.name = 'all-pops'",
        [carrier.id],
      );
      expect(JSON.parse(String(row.inputs))).toEqual(["pop-west", "pop-east"]);
      expect(row).toMatchObject({
        from_ms: T0,
        to_ms: T0 + 3 * WINDOW_MS,
        sample_size: K,
        coordinated: 0,
        windows: 3,
        kept: created.totals.kept,
        duplicates_dropped: 0,
        created_by: `key ${queryPrefix}`,
        kind: "merge",
      });
      expect(Number(row.created_at)).toBeGreaterThanOrEqual(before);
      expect(Number(row.created_at)).toBeLessThanOrEqual(after);
      expect(new Date(created.createdAt!).getTime()).toBe(Number(row.created_at));
      const [audit] = await sql("SELECT actor, actor_user_id, target, detail FROM audit_log WHERE tenant_id = ? AND action = 'merge.create'", [carrier.id]);
      expect(audit).toMatchObject({ actor: `key ${queryPrefix}`, actor_user_id: null, target: "all-pops" });
      expect(JSON.parse(String(audit.detail))).toMatchObject({ inputs: ["pop-west", "pop-east"], from: FROM, to: TO, sampleSize: K, windows: 3 });
    });

    it("answers estimates by its name with the exact totals of its inputs, and an estimate by the DLT 2007 estimator", async () => {
      const byMerge = (await (await estimate("&collectors=all-pops")).json()) as EstimateAnswer;
      const byInputs = (await (await estimate("&collectors=pop-west,pop-east")).json()) as EstimateAnswer;
      expect(byMerge.collectors).toEqual(["all-pops"]);
      expect(byMerge.windows).toBe(3);
      expect(byMerge.exact).toEqual(byInputs.exact);
      // Σ over kept records of max(w_i, τ) (DLT 2007, §1), window by window.
      const merged = await storedReservoirs(t.server.db.$client, carrier.id, "all-pops");
      const expected = merged.reduce((sum, m) => sum + m.kept.reduce((s, e) => s + Math.max(e.weight, m.tau), 0), 0);
      expect(byMerge.estimate).toBeCloseTo(expected, 6);
      // The interval holds the estimate, except that no interval reaches past the range's exact
      // total (no subset holds more), which an unbiased estimate may exceed.
      const total = Number(byMerge.exact.bytes);
      expect(byMerge.ci95[0]).toBeLessThanOrEqual(byMerge.estimate);
      expect(byMerge.ci95[1]).toBeGreaterThanOrEqual(Math.min(byMerge.estimate, total));
      expect(byMerge.ci95[1]).toBeLessThanOrEqual(total);
    });

    it("is left out of a question that names no collector, and refused together with one of its inputs", async () => {
      const all = (await (await estimate("")).json()) as EstimateAnswer;
      expect(all.collectors).toEqual(["pop-east", "pop-west"]);
      const byInputs = (await (await estimate("&collectors=pop-west,pop-east")).json()) as EstimateAnswer;
      expect(all.exact).toEqual(byInputs.exact);
      const both = await estimate("&collectors=all-pops,pop-east");
      expect(both.status).toBe(422);
      expect((await both.json()).error.code).toBe("overlapping_collectors");
    });

    it("is refused together with another merge that shares one of its inputs (pop-west), and counted with one that shares none", async () => {
      // west-lab merges pop-west (also an input of all-pops) with lab-tap; neither merge is an input of the other.
      const made = await post({ name: "west-lab", collectors: ["pop-west", "lab-tap"], from: FROM, to: TO });
      expect(made.status, await made.clone().text()).toBe(201);
      // Each merge alone is a fine question.
      expect((await estimate("&collectors=west-lab")).status).toBe(200);
      // DLT 2007 sums the samples of disjoint streams only; pop-west's records sit in both merges, so
      // summing them counts pop-west twice: refused with 422, whichever order the merges are named in.
      for (const names of ["all-pops,west-lab", "west-lab,all-pops"]) {
        const res = await estimate(`&collectors=${names}`);
        expect(res.status, names).toBe(422);
        const { error } = await res.json();
        expect(error.code, names).toBe("overlapping_collectors");
        // The one collector whose records both merges hold (from the inputs the test gave each merge).
        expect(error.details, names).toEqual([{ path: "where.collectors", message: expect.stringContaining("both hold a sample of pop-west's records") }]);
      }
      // Disjoint inputs (pop-west and lab-tap against pop-east) are summed without complaint.
      const disjoint = await estimate("&collectors=west-lab,pop-east");
      expect(disjoint.status, await disjoint.clone().text()).toBe(200);
      // Asked explicitly, the overlap is counted and stated: the exact records are pop-west's twice
      // plus pop-east's once (counted in the test from the records it sent; lab-tap got none).
      const allowed = await fetch(`${t.url}/api/v1/estimate`, {
        method: "POST",
        headers: { authorization: `Bearer ${queryKey}`, "content-type": "application/json" },
        body: JSON.stringify({ from: FROM, to: TO, where: { collectors: ["all-pops", "west-lab"] }, allowOverlap: true }),
      });
      expect(allowed.status, await allowed.clone().text()).toBe(200);
      const answer = (await allowed.json()) as EstimateAnswer;
      expect(answer.exact.records).toBe(2 * sent.get("pop-west")!.length + sent.get("pop-east")!.length);
      expect(answer.collectorRule!.rule).toBe("overlap-allowed");
      expect(answer.collectorRule!.overlaps.map((o) => [o.code, o.shared])).toEqual([["overlapping_collectors", "pop-west"]]);
    });

    it("keeps k_m = min(sample size wanted, inputs' k): a smaller merge is the union's sample of that size", async () => {
      const res = await post({ name: "all-pops-16", collectors: ["pop-east", "pop-west"], from: FROM, to: TO, sampleSize: 16 });
      expect(res.status, await res.clone().text()).toBe(201);
      const answer = (await res.json()) as MergeAnswer;
      expect(answer.windows.map((w) => w.k)).toEqual([16, 16, 16]);
      const merged = await storedReservoirs(t.server.db.$client, carrier.id, "all-pops-16");
      for (const m of merged) {
        const union = new Reservoir<number>(16);
        drawn.filter((d) => d.windowStart === m.windowStart).forEach((d, i) => union.offer(i, d.weight, d.u));
        expect(m.kept.map((e) => e.priority)).toEqual(union.kept().map((e) => e.priority));
        expect(m.tau).toBe(union.tau);
      }
      // Asking for more than the inputs hold gives their k (the merge cannot keep records no input kept).
      const larger = await post({ name: "larger", collectors: ["pop-west"], from: FROM, to: TO, sampleSize: 4096, preview: true });
      expect(((await larger.json()) as MergeAnswer).windows.every((w) => w.k === K)).toBe(true);
    });

    it("answers 409 for a name that is taken, saying by what", async () => {
      const again = await post({ name: "all-pops", collectors: ["pop-west"], from: FROM, to: TO });
      expect(again.status).toBe(409);
      expect((await again.json()).error.message).toContain("is an existing merge; delete it first");
      const stream = await post({ name: "pop-east", collectors: ["pop-west"], from: FROM, to: TO, preview: true });
      expect(stream.status).toBe(409);
      expect((await stream.json()).error.message).toContain("pop-east is a stream collector");
    });

    it("answers 422 for a merge given as an input", async () => {
      const res = await post({ name: "nested", collectors: ["all-pops", "lab-tap"], from: FROM, to: TO });
      expect(res.status).toBe(422);
      const { error } = await res.json();
      expect(error.details).toEqual([
        { path: "collectors[0]", message: "all-pops is a merge (of pop-west, pop-east); a merge takes stream collectors only, so name its inputs instead" },
      ]);
    });

    it("leaves nothing behind when the write fails midway (one transaction)", async () => {
      // A trigger that fails the provenance insert, after the collector row went in.
      await t.server.db.$client.execute("CREATE TRIGGER test_fail_merge BEFORE INSERT ON merges BEGIN SELECT raise(ABORT, 'test failure'); END");
      try {
        const res = await post({ name: "half-done", collectors: ["pop-west"], from: FROM, to: TO });
        expect(res.status).toBe(500);
      } finally {
        await t.server.db.$client.execute("DROP TRIGGER test_fail_merge");
      }
      expect(await sql("SELECT id FROM collectors WHERE tenant_id = ? AND name = 'half-done'", [carrier.id])).toHaveLength(0);
      expect(await sql("SELECT id FROM audit_log WHERE target = 'half-done'")).toHaveLength(0);
      // The name is free again.
      const retry = await post({ name: "half-done", collectors: ["pop-west"], from: FROM, to: TO });
      expect(retry.status).toBe(201);
    });

    it("deletes a merge (reservoirs and provenance go with it), refuses stream collectors and unknown names", async () => {
      const del = (search: string) => fetch(`${t.url}/api/v1/merge${search}`, { method: "DELETE", headers: { authorization: `Bearer ${queryKey}` } });
      expect((await del("")).status).toBe(400);
      expect((await del("?name=pop-west")).status).toBe(422);
      expect((await del("?name=no-such")).status).toBe(404);
      const before = (await sql("SELECT count(*) AS n FROM kept_records"))[0].n;
      const mergedKept = (await storedReservoirs(t.server.db.$client, carrier.id, "half-done")).reduce((n, r) => n + r.kept.length, 0);
      const res = await del("?name=half-done");
      expect(res.status).toBe(200);
      const body = await res.json();
      expect(body.deleted).toMatchObject({ name: "half-done", inputs: ["pop-west"], createdBy: `key ${queryPrefix}` });
      expect(await sql("SELECT id FROM collectors WHERE tenant_id = ? AND name = 'half-done'", [carrier.id])).toHaveLength(0);
      expect(await sql("SELECT m.id FROM merges m LEFT JOIN collectors c ON c.id = m.collector_id WHERE c.id IS NULL")).toHaveLength(0);
      expect((await sql("SELECT count(*) AS n FROM kept_records"))[0].n).toBe(Number(before) - mergedKept);
      const [audit] = await sql("SELECT actor, target FROM audit_log WHERE tenant_id = ? AND action = 'merge.delete'", [carrier.id]);
      expect(audit).toMatchObject({ actor: `key ${queryPrefix}`, target: "half-done" });
      // The inputs are untouched: the same exact totals as before.
      const byInputs = (await (await estimate("&collectors=pop-west")).json()) as EstimateAnswer;
      expect(byInputs.exact.records).toBe(sent.get("pop-west")!.length);
      expect((await del("?name=half-done")).status).toBe(404);
    });
  });
});
