import { gzipSync } from "node:zlib";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { ipfixMessages, testFlows } from "../collect/helpers";
import { keyFor, postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";

// A key's visible prefix (weir_<8 hex>) is shown in key lists and in the Ledger, so it proves
// nothing: every endpoint that takes an API key must check the secret after it. Each endpoint
// is asked with the real prefix and a wrong secret of the right length and alphabet (every
// character changed, or only the last one) and must answer 401 (RFC 9110 §15.5.2; RFC 6750
// §3.1: an invalid token is answered with 401) and change nothing; the same request with
// the real key then goes through, so the 401 came from the secret and from nothing else.

const T0 = Date.UTC(2024, 4, 1, 2, 0);
const WINDOW_MS = 300_000;
const FROM = new Date(T0).toISOString();
const TO = new Date(T0 + 2 * WINDOW_MS).toISOString();
const RANGE = `from=${FROM}&to=${TO}`;
// The 64 characters of base64url (RFC 4648 §5), the secret's alphabet.
const BASE64URL = "ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789-_";

/** The key's prefix and secret, split where the key format puts the last underscore: weir_<8 hex>_<32 base64url>. */
function split(key: string): { prefix: string; secret: string } {
  const match = /^(weir_[0-9a-f]{8})_([A-Za-z0-9_-]{32})$/.exec(key);
  if (!match) throw new Error(`not a Weir key: ${key}`);
  return { prefix: match[1], secret: match[2] };
}

/** The character `by` places after `c` in base64url: never `c` itself for 0 < by < 64. */
function shifted(c: string, by: number): string {
  return BASE64URL[(BASE64URL.indexOf(c) + by) % BASE64URL.length];
}

/** Wrong secrets for a real key's prefix, each 32 base64url characters like the real one. */
function forgeries(key: string): { label: string; key: string }[] {
  const { prefix, secret } = split(key);
  const everyChar = [...secret].map((c) => shifted(c, 1)).join("");
  const lastChar = secret.slice(0, -1) + shifted(secret.slice(-1), 1);
  return [
    { label: "every character of the secret changed", key: `${prefix}_${everyChar}` },
    { label: "only the last character of the secret changed", key: `${prefix}_${lastChar}` },
  ];
}

describe("a real key prefix with a wrong secret", () => {
  let t: TestServer;
  let key: string;
  // A key of a collector with no live records: the only kind a sample file may be imported into.
  let copyKey: string;
  let tenantId: number;

  const sql = async (q: string, args: (string | number)[] = []) => (await t.server.db.$client.execute({ sql: q, args })).rows;
  const bearer = (k: string) => ({ authorization: `Bearer ${k}` });

  /** The tenant's stored exact counters and how many batches and merges it has, read from SQLite. */
  async function state() {
    const [r] = await sql("SELECT coalesce(sum(records), 0) AS records, count(*) AS reservoirs FROM reservoirs WHERE tenant_id = ?", [tenantId]);
    const [b] = await sql("SELECT count(*) AS n FROM ingest_batches WHERE tenant_id = ?", [tenantId]);
    const [c] = await sql("SELECT count(*) AS n FROM collectors WHERE tenant_id = ?", [tenantId]);
    return { records: Number(r.records), reservoirs: Number(r.reservoirs), batches: Number(b.n), collectors: Number(c.n) };
  }

  beforeAll(async () => {
    t = await startTestServer();
    // Scope "both", so a 401 can only come from the secret, never from a missing scope (that is a 403).
    const made = await tenantWithKey(t.server, "keyholder", { collector: "edge-1", scope: "both", sampleSize: 16 });
    key = made.key;
    tenantId = made.tenant.id;
    // Something to estimate, export and merge: two windows of the key's own collector.
    const res = await postFlows(t.url, key, JSON.stringify(testFlows(40, 5, T0)));
    expect(res.status, await res.clone().text()).toBe(200);
    const later = await postFlows(t.url, key, JSON.stringify(testFlows(40, 6, T0 + WINDOW_MS)));
    expect(later.status, await later.clone().text()).toBe(200);
    // A merge for the DELETE case, made with the real key.
    const merged = await fetch(`${t.url}/api/v1/merge`, {
      method: "POST",
      headers: { ...bearer(key), "content-type": "application/json" },
      body: JSON.stringify({ name: "to-delete", collectors: ["edge-1"], from: FROM, to: TO }),
    });
    expect(merged.status, await merged.clone().text()).toBe(201);
    copyKey = (await keyFor(t.server, tenantId, "copy-1", "both")).key;
  });

  afterAll(async () => {
    await t?.close();
  });

  // Every route that calls authenticateKey (app/routes/api.v1.*.ts), with each method it takes
  // a key on, and the status the real key gets for the same request.
  const endpoints: { name: string; ok: number; send: (k: string) => Promise<Response>; copy?: true }[] = [
    {
      name: "POST /api/v1/flows (JSON)",
      ok: 200,
      send: (k) => postFlows(t.url, k, JSON.stringify(testFlows(5, 7, T0))),
    },
    {
      name: "POST /api/v1/flows (NDJSON, gzip)",
      ok: 200,
      send: (k) =>
        postFlows(t.url, k, gzipSync(testFlows(5, 8, T0).map((f) => JSON.stringify(f)).join("\n")), {
          "content-type": "application/x-ndjson",
          "content-encoding": "gzip",
        }),
    },
    {
      name: "POST /api/v1/flows (IPFIX file)",
      ok: 200,
      send: (k) => postFlows(t.url, k, Buffer.concat(ipfixMessages(testFlows(5, 9, T0), 5)), { "content-type": "application/ipfix" }),
    },
    {
      name: "GET /api/v1/estimate",
      ok: 200,
      send: (k) => fetch(`${t.url}/api/v1/estimate?${RANGE}`, { headers: bearer(k) }),
    },
    {
      name: "POST /api/v1/estimate",
      ok: 200,
      send: (k) =>
        fetch(`${t.url}/api/v1/estimate`, {
          method: "POST",
          headers: { ...bearer(k), "content-type": "application/json" },
          body: JSON.stringify({ from: FROM, to: TO }),
        }),
    },
    {
      name: "GET /api/v1/samples (export)",
      ok: 200,
      send: (k) => fetch(`${t.url}/api/v1/samples?${RANGE}`, { headers: bearer(k) }),
    },
    {
      name: "POST /api/v1/samples (import)",
      ok: 200,
      copy: true,
      send: async (k) => {
        // A file Weir wrote itself, read with the real key: a valid file for the key's collector.
        const file = await (await fetch(`${t.url}/api/v1/samples?${RANGE}`, { headers: bearer(key) })).text();
        return fetch(`${t.url}/api/v1/samples`, { method: "POST", headers: { ...bearer(k), "content-type": "application/json" }, body: file });
      },
    },
    {
      name: "POST /api/v1/merge (preview)",
      ok: 200,
      send: (k) =>
        fetch(`${t.url}/api/v1/merge`, {
          method: "POST",
          headers: { ...bearer(k), "content-type": "application/json" },
          body: JSON.stringify({ name: "preview-only", collectors: ["edge-1"], from: FROM, to: TO, preview: true }),
        }),
    },
    {
      name: "POST /api/v1/merge (create)",
      ok: 201,
      send: (k) =>
        fetch(`${t.url}/api/v1/merge`, {
          method: "POST",
          headers: { ...bearer(k), "content-type": "application/json" },
          body: JSON.stringify({ name: "created", collectors: ["edge-1"], from: FROM, to: TO }),
        }),
    },
    {
      name: "DELETE /api/v1/merge",
      ok: 200,
      send: (k) => fetch(`${t.url}/api/v1/merge?name=to-delete`, { method: "DELETE", headers: bearer(k) }),
    },
    {
      name: "GET /api/v1/calibration",
      ok: 200,
      send: (k) => fetch(`${t.url}/api/v1/calibration`, { headers: bearer(k) }),
    },
  ];

  it.each(endpoints)("$name: 401 for a wrong secret, nothing changed; the real key goes through", async ({ send, ok, copy }) => {
    const real = copy ? copyKey : key;
    const before = await state();
    for (const forged of forgeries(real)) {
      const res = await send(forged.key);
      // RFC 9110 §15.5.2 / RFC 6750 §3.1: an invalid credential is a 401; the code is Weir's documented one.
      expect(res.status, forged.label).toBe(401);
      expect(((await res.json()) as { error: { code: string } }).error.code, forged.label).toBe("unauthenticated");
      // Nothing was stored, deleted or merged on a forged key (counted in SQLite before and after).
      expect(await state(), forged.label).toEqual(before);
    }
    const accepted = await send(real);
    expect(accepted.status, await accepted.clone().text()).toBe(ok);
  });

  it("the forged keys really share the real key's prefix and length and differ only in the secret (computed in the test)", () => {
    for (const forged of forgeries(key)) {
      expect(forged.key).not.toBe(key);
      expect(forged.key.length).toBe(key.length);
      expect(split(forged.key).prefix).toBe(split(key).prefix);
      expect(split(forged.key).secret).not.toBe(split(key).secret);
    }
  });
});
