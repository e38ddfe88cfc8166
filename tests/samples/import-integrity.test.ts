import { gzipSync } from "node:zlib";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { flowRecordToJson } from "~/flow/record";
import { seededUniform } from "~/sampling/uniform";
import { benchRecords } from "../../scripts/bench/data";
import { keyFor, postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";

// What an import must refuse because it would count records twice. The merge of priority
// samples (N. Duffield, C. Lund, M. Thorup, "Priority sampling for estimation of arbitrary
// subset sums", J. ACM 54(6), 2007) is valid only for disjoint record streams: the same file
// again, or a window of the same provenance (collector, node, window named in the file) again,
// breaks that. A refused import changes nothing. And a key writes only to its own collector.

const WINDOW_MS = 300_000;
const T0 = Date.UTC(2026, 3, 7, 9);

describe("import integrity: repeated files, overlapping windows, keys tied to their collector", () => {
  let t: TestServer;
  let queryKey = "";
  const keys: Record<string, string> = {};

  const count = async (table: string) => Number((await t.server.db.$client.execute(`SELECT count(*) FROM ${table}`)).rows[0][0]);
  /** The rows an import writes, counted, and the reservoirs' counters. */
  async function state() {
    const reservoirs = await t.server.db.$client.execute("SELECT id, records, bytes, tau, next_seq FROM reservoirs ORDER BY id");
    return {
      reservoirs: reservoirs.rows.map((r) => Array.from(r)),
      kept: await count("kept_records"),
      imports: await count("sample_imports"),
      importedWindows: await count("imported_windows"),
      collectors: (await t.server.db.$client.execute("SELECT name, copy_of FROM collectors ORDER BY id")).rows.map((r) => Array.from(r)),
      ledger: await count("audit_log"),
    };
  }
  const importFile = (key: string, body: BodyInit, search = "", headers: Record<string, string> = {}) =>
    fetch(`${t.url}/api/v1/samples${search}`, { method: "POST", headers: { authorization: `Bearer ${key}`, "content-type": "application/json", ...headers }, body });
  const exportFile = async (fromMs: number, toMs: number) => {
    const res = await fetch(`${t.url}/api/v1/samples?from=${fromMs}&to=${toMs}&collectors=edge-1`, { headers: { authorization: `Bearer ${queryKey}` } });
    expect(res.status).toBe(200);
    return res.text();
  };

  beforeAll(async () => {
    t = await startTestServer({ uniform: seededUniform(3) });
    const edge = await tenantWithKey(t.server, "carrier", { collector: "edge-1", scope: "both", sampleSize: 16 });
    queryKey = edge.key;
    for (const name of ["copy-a", "copy-b"]) keys[name] = (await keyFor(t.server, edge.tenant.id, name, "ingest")).key;
    // Invented flows on documentation space (RFC 5737) over four windows.
    const records = [...benchRecords(400, T0, T0 + 4 * WINDOW_MS, 17)].map(flowRecordToJson);
    expect((await postFlows(t.url, edge.key, JSON.stringify(records))).status).toBe(200);
  });
  afterAll(() => t?.close());

  it("the same file again → 409 duplicate_import naming the earlier import (collector, when, who); nothing changes", async () => {
    const file = await exportFile(T0, T0 + 2 * WINDOW_MS);
    const first = await importFile(keys["copy-a"], file, "?collector=copy-a");
    expect(first.status, await first.clone().text()).toBe(200);
    const prefix = keys["copy-a"].slice(0, 13);
    const before = await state();
    expect(before.imports).toBe(1);

    // Again into the same collector, gzip-compressed (the digest is of the file after decoding), and into another collector.
    const attempts: [string, BodyInit, string, Record<string, string>][] = [
      [keys["copy-a"], file, "?collector=copy-a", {}],
      [keys["copy-a"], gzipSync(file), "", { "content-encoding": "gzip" }],
      [keys["copy-b"], file, "?collector=copy-b", {}],
    ];
    for (const [key, body, search, headers] of attempts) {
      const res = await importFile(key, body, search, headers);
      const answer = await res.json();
      expect(res.status, JSON.stringify(answer)).toBe(409);
      expect(answer.error.code).toBe("duplicate_import");
      expect(answer.error.message).toMatch(new RegExp(`imported already: into copy-a at \\d{4}-\\d{2}-\\d{2}T[\\d:.]+Z by key ${prefix}`));
      expect(answer.error.earlier).toMatchObject({ collector: "copy-a", by: `key ${prefix}` });
    }
    expect(await state()).toEqual(before);
  });

  it("a different file holding a window of the same provenance → 409 overlapping_import naming the window and the earlier import", async () => {
    const before = await state();
    // [T0+W, T0+3W) overlaps the first import's [T0, T0+2W) in the window T0+W of edge-1.
    const file = await exportFile(T0 + WINDOW_MS, T0 + 3 * WINDOW_MS);
    const res = await importFile(keys["copy-b"], file, "?collector=copy-b");
    const answer = await res.json();
    expect(res.status, JSON.stringify(answer)).toBe(409);
    expect(answer.error.code).toBe("overlapping_import");
    const window = new Date(T0 + WINDOW_MS).toISOString();
    expect(answer.error.window).toMatchObject({ collector: "edge-1", windowStart: window, windowSeconds: 300 });
    expect(answer.error.message).toContain(`the window ${window} (300 s) of edge-1`);
    expect(answer.error.message).toMatch(/imported already: into copy-a at .* by key weir_/);
    expect(await state()).toEqual(before);

    // The windows not imported before are accepted.
    const rest = await importFile(keys["copy-b"], await exportFile(T0 + 2 * WINDOW_MS, T0 + 4 * WINDOW_MS), "?collector=copy-b");
    expect(rest.status, await rest.clone().text()).toBe(200);
  });

  it("a key of one collector cannot import into another (403 wrong_collector); without collector it imports into its own", async () => {
    const before = await state();
    const file = await exportFile(T0 + 3 * WINDOW_MS, T0 + 4 * WINDOW_MS);
    const res = await importFile(keys["copy-a"], file, "?collector=copy-b");
    const answer = await res.json();
    expect(res.status, JSON.stringify(answer)).toBe(403);
    expect(answer.error).toMatchObject({ code: "wrong_collector", message: expect.stringContaining("this key belongs to the collector copy-a") });
    // A key of edge-1 naming a new collector is refused the same way.
    expect((await importFile(queryKey, file, "?collector=brand-new")).status).toBe(403);
    expect(await state()).toEqual(before);
  });

  it("refuses a collector that receives live records (409 live_collector)", async () => {
    const before = await state();
    const file = await exportFile(T0 + 3 * WINDOW_MS, T0 + 4 * WINDOW_MS);
    // The key's own collector, edge-1, by default: it holds records sent to it.
    const res = await importFile(queryKey, file);
    const answer = await res.json();
    expect(res.status, JSON.stringify(answer)).toBe(409);
    expect(answer.error.code).toBe("live_collector");
    expect(await state()).toEqual(before);
  });
});
