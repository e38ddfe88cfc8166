import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { EnvError, parseEnv } from "~/env.server";
import { startServer, type WeirServer } from "~/server/app.server";

describe("server (development mode, Vite middleware)", () => {
  let dir: string;
  let server: WeirServer;

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), "weir-smoke-"));
    server = await startServer({
      env: parseEnv({
        NODE_ENV: "development",
        HOST: "127.0.0.1",
        PORT: "0", IPFIX_UDP_PORT: "0", NETFLOW_UDP_PORT: "0", IPFIX_TCP_PORT: "0",
        // A nested directory that does not exist yet: createDb must make it.
        DATABASE_URL: `file:${join(dir, "nested", "weir.db")}`,
        NODE_ID: "smoke-node",
        LOG_LEVEL: "silent",
      }),
    });
  });

  afterAll(async () => {
    await server?.close();
    if (dir) rmSync(dir, { recursive: true, force: true });
  });

  it("serves the landing page", async () => {
    const res = await fetch(`${server.url}/`);
    expect(res.status).toBe(200);
    expect(res.headers.get("content-type")).toMatch(/text\/html/);
    const html = await res.text();
    expect(html).toContain("<title>Weir — priority samples of network flow records</title>");
    expect(html).toContain("Estimates are statistical");
    expect(html).toContain("Flow records can be personal data");
  });

  it("reports health with the node id after querying the database", async () => {
    const res = await fetch(`${server.url}/healthz`);
    expect(res.status).toBe(200);
    expect(res.headers.get("cache-control")).toBe("no-store");
    const body = await res.json();
    expect(body).toMatchObject({ ok: true, node: "smoke-node", db: "ok" });
    // Every listener is off here: no decode worker runs.
    expect(body.collection).toMatchObject({ healthy: true, worker: "off", ports: {} });
  });

  it("answers an unknown path with a 404 page from the shared error panel", async () => {
    const res = await fetch(`${server.url}/no/such/page`);
    expect(res.status).toBe(404);
    const html = await res.text();
    expect(html).toContain("Not found");
    expect(html).toContain("Nothing lives at this address.");
  });

  it("serves the favicon", async () => {
    const res = await fetch(`${server.url}/favicon.ico`);
    expect(res.status).toBe(200);
    const bytes = new Uint8Array(await res.arrayBuffer());
    // ICO header: reserved 0, type 1 (icon)
    expect(Array.from(bytes.slice(0, 4))).toEqual([0, 0, 1, 0]);
  });

  it("migrated every table at start", async () => {
    const result = await server.db.$client.execute(
      "select name from sqlite_master where type = 'table' and name not like 'sqlite_%' order by name",
    );
    expect(result.rows.map((row) => row.name)).toEqual([
      "__drizzle_migrations",
      "api_keys",
      "audit_log",
      "collectors",
      "exporter_claims",
      "exporters",
      "imported_windows",
      "ingest_batches",
      "invites",
      "kept_records",
      "memberships",
      "merges",
      "packed_columns",
      "reservoirs",
      "sample_imports",
      "tenants",
      "users",
      "window_checks",
    ]);
  });

  it("opens the file in WAL mode with full sync and foreign keys enforced", async () => {
    const pragma = async (name: string) =>
      (await server.db.$client.execute(`PRAGMA ${name}`)).rows[0]?.[0];
    expect(await pragma("journal_mode")).toBe("wal");
    expect(await pragma("synchronous")).toBe(2);
    expect(await pragma("foreign_keys")).toBe(1);
    expect(await pragma("busy_timeout")).toBe(5000);
  });
});

describe("parseEnv", () => {
  it("fills every default from an empty environment", () => {
    const env = parseEnv({});
    expect(env).toMatchObject({
      NODE_ENV: "development",
      HOST: "127.0.0.1",
      PORT: 3000,
      DATABASE_URL: "file:./data/weir.db",
      NODE_ID: "node-1",
      LOG_LEVEL: "info",
      INGEST_MAX_BODY_BYTES: 16_777_216,
      INGEST_MAX_RECORDS: 100_000,
      IDEMPOTENCY_TTL_HOURS: 24,
    });
    expect(env.DATABASE_AUTH_TOKEN).toBeUndefined();
  });

  it("treats empty strings as unset", () => {
    expect(parseEnv({ PORT: "", DATABASE_AUTH_TOKEN: "" })).toMatchObject({ PORT: 3000 });
  });

  it("rejects a bad value with a message naming the variable and the value", () => {
    expect(() => parseEnv({ PORT: "eighty" })).toThrow(EnvError);
    expect(() => parseEnv({ PORT: "eighty" })).toThrow(/PORT: .*\(got "eighty"\)/);
  });

  it("lists every bad variable at once", () => {
    try {
      parseEnv({ PORT: "70000", LOG_LEVEL: "loud", INGEST_MAX_RECORDS: "-5" });
      expect.unreachable("parseEnv accepted invalid values");
    } catch (error) {
      expect(error).toBeInstanceOf(EnvError);
      const names = (error as EnvError).problems.map((p) => p.split(":")[0]).sort();
      expect(names).toEqual(["INGEST_MAX_RECORDS", "LOG_LEVEL", "PORT"]);
    }
  });

  it("requires a real session secret in production without echoing the secret", () => {
    expect(() => parseEnv({ NODE_ENV: "production" })).toThrow(/SESSION_SECRET: must be set in production/);
    const secret = "short-secret";
    try {
      parseEnv({ NODE_ENV: "production", SESSION_SECRET: secret });
      expect.unreachable("parseEnv accepted a short secret");
    } catch (error) {
      expect((error as EnvError).message).toMatch(/SESSION_SECRET: must be at least 32 characters/);
      expect((error as EnvError).message).not.toContain(secret);
    }
    const github = { GITHUB_CLIENT_ID: "Iv1.0123456789abcdef", GITHUB_CLIENT_SECRET: "0".repeat(40), SMTP_URL: "smtp://mail.example.com:587" };
    expect(parseEnv({ NODE_ENV: "production", SESSION_SECRET: "x".repeat(32), ...github }).NODE_ENV).toBe("production");
  });

  it("requires GitHub OAuth credentials in production, where no fake sign-in exists", () => {
    expect(() => parseEnv({ NODE_ENV: "production", SESSION_SECRET: "x".repeat(32) })).toThrow(/GITHUB_CLIENT_ID: must be set in production/);
    expect(() => parseEnv({ GITHUB_CLIENT_ID: "Iv1.0123456789abcdef" })).toThrow(/GITHUB_CLIENT_SECRET: GITHUB_CLIENT_ID and GITHUB_CLIENT_SECRET go together/);
  });

  it("requires an SMTP relay in production, where no fake mail server exists", () => {
    const rest = { NODE_ENV: "production", SESSION_SECRET: "x".repeat(32), GITHUB_CLIENT_ID: "Iv1.0123456789abcdef", GITHUB_CLIENT_SECRET: "0".repeat(40) };
    expect(() => parseEnv(rest)).toThrow(/SMTP_URL: must be set in production/);
  });
});
