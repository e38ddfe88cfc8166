import { afterAll, beforeAll, describe, expect, it } from "vitest";
import type { EstimateAnswer } from "~/query/answer";
import { seededUniform } from "~/sampling/uniform";
import { postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";
import { matchesItems } from "./reference";

// The AS number and interface filters and group-bys end to end: records posted through
// POST /api/v1/flows with bgpSourceAsNumber, bgpDestinationAsNumber, ingressInterface and
// egressInterface (IPFIX names, RFC 7012 / IANA registry), asked about through
// /api/v1/estimate at τ = 0 (k = 1024 is above every window's record count, so each answer is
// the exact subset sum: Duffield, Lund, Thorup, J. ACM 54(6), 2007, §2, τ = 0 keeps every
// record), and compared with sums the test computes from the records it sent.

const WINDOW_MS = 300_000;
// Two recent closed windows, so no time check on ingest refuses them.
const T0 = Math.floor(Date.now() / WINDOW_MS) * WINDOW_MS - 4 * WINDOW_MS;
const FROM = new Date(T0).toISOString();
const TO = new Date(T0 + 2 * WINDOW_MS).toISOString();

interface Sent {
  bytes: number;
  packets: number;
  dport: number;
  srcAs: number | null;
  dstAs: number | null;
  inIf: number | null;
  outIf: number | null;
}

type Field = "srcAs" | "dstAs" | "inIf" | "outIf";
const FIELDS: Field[] = ["srcAs", "dstAs", "inIf", "outIf"];
const IPFIX_NAME: Record<Field, string> = {
  srcAs: "bgpSourceAsNumber",
  dstAs: "bgpDestinationAsNumber",
  inIf: "ingressInterface",
  outIf: "egressInterface",
};

/**
 * 400 invented records in documentation space (RFC 5737) with AS numbers from both
 * documentation blocks of RFC 5398 (64496–64511, and 65536–65551, which needs 4 octets: RFC
 * 6793) and interface indexes 1–12 (ifIndex values, RFC 2863), each absent about one time in
 * five as when an exporter does not send it.
 */
function invent(): { sent: Sent[]; json: Record<string, unknown>[] } {
  const u = seededUniform(5398);
  const int = (low: number, high: number) => low + Math.floor(u() * (high - low + 1));
  const maybe = (make: () => number) => (u() < 0.2 ? null : make());
  const asn = () => (u() < 0.5 ? int(64496, 64511) : int(65536, 65551));
  const sent: Sent[] = [];
  const json: Record<string, unknown>[] = [];
  for (let i = 0; i < 400; i++) {
    const r: Sent = {
      bytes: int(40, 1_500_000),
      packets: int(1, 1000),
      dport: [443, 80, 53][i % 3],
      srcAs: maybe(asn),
      dstAs: maybe(asn),
      inIf: maybe(() => int(1, 12)),
      outIf: maybe(() => int(1, 12)),
    };
    sent.push(r);
    const record: Record<string, unknown> = {
      src: `198.51.100.${i % 256}`,
      dst: `203.0.113.${(i * 7) % 256}`,
      sport: 1024 + i,
      dport: r.dport,
      proto: r.dport === 53 ? 17 : 6,
      bytes: r.bytes,
      packets: r.packets,
      start: T0 + (i % 2) * WINDOW_MS + i,
    };
    for (const f of FIELDS) if (r[f] !== null) record[IPFIX_NAME[f]] = r[f];
    json.push(record);
  }
  return { sent, json };
}

const { sent, json: records } = invent();

type Items = (number | string)[];

/** The exact sum the answer must give, from the records as sent. */
function truth(where: Partial<Record<Field, Items>> & { dport?: number[] }, metric: "bytes" | "packets" | "flows"): number {
  let sum = 0;
  for (const r of sent) {
    if (!FIELDS.every((f) => matchesItems(r[f], where[f]))) continue;
    if (where.dport && !where.dport.includes(r.dport)) continue;
    sum += metric === "bytes" ? r.bytes : metric === "packets" ? r.packets : 1;
  }
  return sum;
}

describe("AS number and interface filters and group-by, end to end", () => {
  let t: TestServer;
  let key: string;

  beforeAll(async () => {
    t = await startTestServer();
    key = (await tenantWithKey(t.server, "riverline", { sampleSize: 1024 })).key;
    const res = await postFlows(t.url, key, JSON.stringify(records));
    expect(res.status, await res.clone().text()).toBe(200);
  });
  afterAll(() => t?.close());

  const post = async (body: unknown) => {
    const res = await fetch(`${t.url}/api/v1/estimate`, {
      method: "POST",
      headers: { authorization: `Bearer ${key}`, "content-type": "application/json" },
      body: JSON.stringify(body),
    });
    return { status: res.status, json: await res.json() };
  };
  const get = async (search: string) => {
    const res = await fetch(`${t.url}/api/v1/estimate?${search}`, { headers: { authorization: `Bearer ${key}` } });
    return { status: res.status, json: await res.json() };
  };
  const answer = async (body: object): Promise<EstimateAnswer> => {
    const res = await post({ from: FROM, to: TO, ...body });
    expect(res.status, JSON.stringify(res.json)).toBe(200);
    return res.json;
  };

  it("keeps every record (τ = 0), so each answer below is exact", async () => {
    const a = await answer({ metric: "flows" });
    expect(a.estimate).toBe(400);
    expect(a.method).toBe("exact");
  });

  const lists: [Field, Items][] = [
    ["srcAs", [64496]],
    ["srcAs", ["64496-64503", 65540]],
    ["srcAs", ["65536-65551"]],
    ["dstAs", [64511, 65536, "65545"]],
    ["dstAs", ["64496-64511"]],
    ["inIf", [1]],
    ["inIf", ["2-4", 9]],
    ["outIf", ["1-12"]],
    ["outIf", [5, 7, "11-12"]],
  ];

  it.each(lists)("where %s = %j: bytes, packets and flows equal the sums over the records sent", async (field, items) => {
    for (const metric of ["bytes", "packets", "flows"] as const) {
      const expected = truth({ [field]: items }, metric);
      expect(expected).toBeGreaterThan(0);
      const a = await answer({ where: { [field]: items }, metric });
      expect(a.estimate, `${field} ${JSON.stringify(items)} ${metric}`).toBe(expected);
      expect(a.stdError).toBe(0);
    }
  });

  it("answers the same from the stored kept rows as from the live reservoirs (kept-codec.ts layout)", async () => {
    const body = { where: { srcAs: ["64496-64511"], outIf: ["1-6"] }, groupBy: "dstAs", metric: "bytes", top: 1000 };
    const live = await answer(body);
    t.server.manager.clear(); // live reservoirs forgotten: the next query reads SQLite
    const stored = await answer(body);
    expect(stored.estimate).toBe(truth(body.where, "bytes"));
    expect(stored.groups).toEqual(live.groups);
  });

  it("a record without the value is matched by no list, not even the whole range", async () => {
    for (const field of FIELDS) {
      const everything = await answer({ where: { [field]: ["0-4294967295"] }, metric: "flows" });
      const without = sent.filter((r) => r[field] === null).length;
      expect(without).toBeGreaterThan(0);
      expect(everything.estimate, field).toBe(400 - without);
    }
  });

  it("combines the fields with each other and with the port filter (AND across fields, OR within one)", async () => {
    const where = { srcAs: ["64496-64511"], inIf: ["1-6"], outIf: [2, 3, 4, 5, 6, 7, 8], dport: [443] };
    const a = await answer({ where, metric: "bytes" });
    expect(a.estimate).toBe(truth(where, "bytes"));
    expect(a.estimate).toBeGreaterThan(0);
  });

  it("the GET form gives the POST answer, lists comma-separated or repeated", async () => {
    const viaPost = await answer({ where: { srcAs: [64496, "64500-64511"], outIf: ["3-9"] }, metric: "packets", groupBy: "inIf", top: 100 });
    const viaGet = await get(`from=${FROM}&to=${TO}&srcAs=64496,64500-64511&outIf=3-9&metric=packets&groupBy=inIf&top=100`);
    expect(viaGet.status).toBe(200);
    expect(viaGet.json).toEqual(viaPost);
    const repeated = await get(`from=${FROM}&to=${TO}&srcAs=64496&srcAs=64500-64511&outIf=3-9&metric=packets&groupBy=inIf&top=100`);
    expect(repeated.json).toEqual(viaPost);
  });

  it.each(FIELDS)("group by %s equals the sums per value over the records sent, records without one under \"none\"", async (field) => {
    const expected = new Map<string, number>();
    for (const r of sent) {
      const k = r[field] === null ? "none" : String(r[field]);
      expected.set(k, (expected.get(k) ?? 0) + r.bytes);
    }
    const a = await answer({ groupBy: field, metric: "bytes", top: 1000 });
    expect(new Map(a.groups.map((g) => [g.key, g.estimate]))).toEqual(expected);
    // Largest first (the API's order for the top groups).
    const estimates = a.groups.map((g) => g.estimate);
    expect(estimates).toEqual([...estimates].sort((x, y) => y - x));
  });

  it("rank=split keeps the values: at τ = 0 every record is certain and in both halves, so the groups are the exact sums", async () => {
    const expected = new Map<string, number>();
    for (const r of sent) {
      const k = r.outIf === null ? "none" : String(r.outIf);
      expected.set(k, (expected.get(k) ?? 0) + r.packets);
    }
    const a = await answer({ groupBy: "outIf", metric: "packets", top: 1000, rank: "split" });
    expect(new Map(a.groups.map((g) => [g.key, g.estimate]))).toEqual(expected);
  });

  it("group by one field under a filter on another", async () => {
    const where = { dstAs: ["65536-65551"] };
    const expected = new Map<string, number>();
    for (const r of sent) {
      if (!matchesItems(r.dstAs, where.dstAs)) continue;
      const k = r.srcAs === null ? "none" : String(r.srcAs);
      expected.set(k, (expected.get(k) ?? 0) + 1);
    }
    const a = await answer({ where, groupBy: "srcAs", metric: "flows", top: 1000 });
    expect(new Map(a.groups.map((g) => [g.key, g.estimate]))).toEqual(expected);
  });

  it.each([
    // 4-octet AS numbers end at 2^32 − 1 (RFC 6793 §1); so do IPFIX unsigned32 interface indexes (RFC 7012 §3.1.3).
    [{ srcAs: [4294967296] }, "where.srcAs[0]", /AS numbers stop at 4294967295 \(4-octet AS numbers, RFC 6793\)/],
    [{ dstAs: [-64496] }, "where.dstAs[0]", /^is negative/],
    [{ srcAs: ["64511-64496"] }, "where.srcAs[0]", /ends before it starts; did you mean "64496-64511"\?/],
    [{ inIf: ["eth0"] }, "where.inIf[0]", /must be an interface index 0–4294967295 or a range such as "1-48"/],
    [{ outIf: [4294967296] }, "where.outIf[0]", /interface indexes stop at 4294967295/],
  ])("POST %j → 400 at %s", async (where, path, message) => {
    const res = await post({ from: FROM, to: TO, where });
    expect(res.status).toBe(400);
    expect(res.json.error.code).toBe("invalid_query");
    const detail = res.json.error.details.find((d: { path: string }) => d.path === path);
    expect(detail?.message, JSON.stringify(res.json)).toMatch(message);
  });

  it("GET names the parameter as written in its 400", async () => {
    const res = await get(`from=${FROM}&to=${TO}&srcAs=64496,4294967296&inIf=-3`);
    expect(res.status).toBe(400);
    expect(res.json.error.details).toEqual([
      { path: "srcAs[1]", message: 'must be an AS number 0–4294967295 or a range such as "64496-64511"; AS numbers stop at 4294967295 (4-octet AS numbers, RFC 6793)' },
      { path: "inIf[0]", message: 'is negative; must be an interface index 0–4294967295 or a range such as "1-48"' },
    ]);
  });
});
