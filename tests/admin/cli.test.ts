// The admin CLI as a user runs it: a child process against a temporary database.
import { createHash } from "node:crypto";
import { mkdtempSync, readdirSync, readFileSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { ApiError, authenticateKey, hashKey } from "~/auth/api-keys.server";
import { closeDb, createDb, type Db } from "~/db/client.server";
import { findTenantBySlug } from "~/tenants.server";
import { admin } from "../helpers/admin";

const KEY_PATTERN = /^weir_[0-9a-f]{8}_[A-Za-z0-9_-]{32}$/;

/** The rows of a table `admin` printed: columns are separated by two or more spaces. */
function tableRows(stdout: string): string[][] {
  return stdout.trimEnd().split("\n").map((line) => line.split(/ {2,}/));
}

function bearer(key: string): Request {
  return new Request("http://weir.test/api/v1/flows", { headers: { authorization: `Bearer ${key}` } });
}

describe("npm run admin", () => {
  let dir: string;
  let url: string;
  let db: Db;
  const run = (...args: string[]) => admin(url, args);

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), "weir-admin-"));
    url = `file:${join(dir, "weir.db")}`;
    // The CLI runs first, on a database file that does not exist yet: it must migrate.
    const first = await run("tenant", "create", "taken");
    expect(first, first.stderr).toMatchObject({ code: 0 });
    db = await createDb(url);
  });

  afterAll(() => {
    if (db) closeDb(db);
    if (dir) rmSync(dir, { recursive: true, force: true });
  });

  it("creates a tenant with the settings given and shows it in the list", async () => {
    const created = await run("tenant", "create", "acme", "--name", "Acme Transit", "--sample-size", "256", "--window-seconds", "900", "--weight", "packets", "--retention-days", "7");
    expect(created.code, created.stderr).toBe(0);
    expect(created.stdout).toMatch(/Created tenant acme/);
    expect(await findTenantBySlug(db, "acme")).toMatchObject({ name: "Acme Transit", sampleSize: 256, windowSeconds: 900, weightAttribute: "packets", retentionDays: 7 });

    expect((await run("key", "create", "acme", "edge-1")).code).toBe(0);
    const listed = await run("tenant", "list");
    expect(listed.code).toBe(0);
    const rows = tableRows(listed.stdout);
    expect(rows[0]).toEqual(["SLUG", "NAME", "K", "WINDOW", "WEIGHT", "RETENTION", "COLLECTORS"]);
    expect(rows).toContainEqual(["acme", "Acme Transit", "256", "15 min", "packets", "7 d", "1"]);
  });

  it("creates a tenant with roll-up days and coordinated priorities (a 16-byte SipHash key made for it)", async () => {
    const created = await run("tenant", "create", "coordinated-co", "--retention-days", "7", "--hourly-retention-days", "90", "--coordinated");
    expect(created.code, created.stderr).toBe(0);
    expect(created.stdout).toMatch(/fine windows 7 d, hourly until 90 d, coordinated priorities/);
    const tenant = await findTenantBySlug(db, "coordinated-co");
    expect(tenant).toMatchObject({ retentionDays: 7, hourlyRetentionDays: 90, coordinated: true });
    expect(tenant!.coordinationSecret).toMatch(/^[0-9a-f]{32}$/);
  });

  it("fills in the documented defaults", async () => {
    expect((await run("tenant", "create", "plain")).code).toBe(0);
    expect(await findTenantBySlug(db, "plain")).toMatchObject({
      name: "plain",
      sampleSize: 1024,
      windowSeconds: 300,
      weightAttribute: "bytes",
      retentionDays: 30,
      hourlyRetentionDays: 365,
      coordinated: false,
      coordinationSecret: null,
    });
  });

  it("prints a new key alone on the last line of stdout and stores only its SHA-256", async () => {
    // A database of its own, read from disk before this process opens it: closing any
    // descriptor of an open SQLite file drops the process's POSIX locks on it (SQLite,
    // "How To Corrupt An SQLite Database File", §2.2), and readFileSync opens and closes one.
    const keyDir = mkdtempSync(join(tmpdir(), "weir-admin-key-"));
    const keyUrl = `file:${join(keyDir, "weir.db")}`;
    try {
      expect((await admin(keyUrl, ["tenant", "create", "keyed"])).code).toBe(0);
      const created = await admin(keyUrl, ["key", "create", "keyed", "router-1", "--scope", "both"]);
      expect(created.code, created.stderr).toBe(0);
      const key = created.stdout.trimEnd().split("\n").at(-1)!;
      expect(key).toMatch(KEY_PATTERN);
      expect(created.stdout).toBe(`${key}\n`);
      expect(created.stderr).toMatch(new RegExp(`Created ingest\\+query key ${key.slice(0, 13)} for keyed/router-1 \\(new collector\\)`));

      // Neither the key nor its secret part may sit anywhere on disk (database or WAL).
      const secret = key.slice(14);
      const files = readdirSync(keyDir).filter((name) => name.startsWith("weir.db"));
      expect(files).toContain("weir.db");
      for (const name of files) {
        const bytes = readFileSync(join(keyDir, name));
        expect(bytes.includes(key), name).toBe(false);
        expect(bytes.includes(secret), name).toBe(false);
      }

      const keyDb = await createDb(keyUrl);
      try {
        // FIPS 180-4 SHA-256, via node:crypto; the digest of "abc" is the standard's own example.
        expect(hashKey("abc")).toBe("ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad");
        const stored = await keyDb.$client.execute({ sql: "SELECT hash, scopes FROM api_keys WHERE prefix = ?", args: [key.slice(0, 13)] });
        expect(stored.rows).toHaveLength(1);
        expect(stored.rows[0].hash).toBe(createHash("sha256").update(key).digest("hex"));
        expect(stored.rows[0].scopes).toBe("ingest,query");

        const principal = await authenticateKey(keyDb, bearer(key), "ingest");
        expect(principal).toMatchObject({ tenant: { slug: "keyed" }, collector: { name: "router-1" }, scopes: ["ingest", "query"] });
        await expect(authenticateKey(keyDb, bearer(key), "query")).resolves.toMatchObject({ keyId: principal.keyId });
      } finally {
        closeDb(keyDb);
      }
    } finally {
      rmSync(keyDir, { recursive: true, force: true });
    }
  });

  it("creates an ingest key by default, for an existing collector too", async () => {
    expect((await run("tenant", "create", "defaults")).code).toBe(0);
    expect((await run("key", "create", "defaults", "site-a")).code).toBe(0);
    const second = await run("key", "create", "defaults", "site-a");
    expect(second.code).toBe(0);
    expect(second.stderr).toMatch(/Created ingest key weir_[0-9a-f]{8} for defaults\/site-a\. /);
    const key = second.stdout.trim();
    await expect(authenticateKey(db, bearer(key), "ingest")).resolves.toMatchObject({ collector: { name: "site-a" } });
    await expect(authenticateKey(db, bearer(key), "query")).rejects.toMatchObject({ status: 403 });
  });

  it("lists a tenant's keys with prefix, scope, collector and times", async () => {
    expect((await run("tenant", "create", "listed")).code).toBe(0);
    const key = (await run("key", "create", "listed", "probe-7", "--scope", "query")).stdout.trim();
    const listed = await run("key", "list", "listed");
    expect(listed.code).toBe(0);
    const rows = tableRows(listed.stdout);
    expect(rows[0]).toEqual(["PREFIX", "SCOPE", "COLLECTOR", "CREATED", "LAST USED", "REVOKED"]);
    expect(rows).toHaveLength(2);
    expect(rows[1]).toEqual([key.slice(0, 13), "query", "probe-7", expect.stringMatching(/^\d{4}-\d\d-\d\d \d\d:\d\dZ$/), "never", "-"]);
    expect(listed.stdout).not.toContain(key.slice(14));
  });

  it("revokes a key by prefix: it stops authenticating, and a second revoke is an error", async () => {
    expect((await run("tenant", "create", "revoking")).code).toBe(0);
    const key = (await run("key", "create", "revoking", "old-router")).stdout.trim();
    const prefix = key.slice(0, 13);
    await expect(authenticateKey(db, bearer(key), "ingest")).resolves.toBeDefined();

    const revoked = await run("key", "revoke", prefix);
    expect(revoked.code, revoked.stderr).toBe(0);
    expect(revoked.stdout).toContain(`Revoked key ${prefix} (revoking/old-router)`);
    const rejection = await authenticateKey(db, bearer(key), "ingest").catch((error: unknown) => error);
    expect(rejection).toBeInstanceOf(ApiError);
    expect(rejection).toMatchObject({ status: 401 });
    expect(tableRows((await run("key", "list", "revoking")).stdout)[1][5]).toMatch(/^\d{4}-\d\d-\d\d \d\d:\d\dZ$/);

    const again = await run("key", "revoke", prefix);
    expect(again.code).toBe(2);
    expect(again.stderr).toBe(`admin: key ${prefix} (revoking/old-router) is already revoked\n`);
  });

  it("refuses a whole key in revoke without echoing its secret", async () => {
    const key = "weir_0123abcd_ABCDEFGHIJKLMNOPQRSTUVWXYZ012345";
    const result = await run("key", "revoke", key);
    expect(result.code).toBe(2);
    expect(result.stderr).toBe("admin: give only the key's prefix (weir_0123abcd), not the whole key\n");
  });

  // Independent of one another and of the tests above (none of them creates "never-made"), so they run side by side.
  it.concurrent.for<[string[], RegExp]>([
    [["tenant", "create", "taken"], /^admin: tenant 'taken' already exists$/],
    [["tenant", "create", "Bad_Slug"], /^admin: <slug>: must be 1–48 lowercase letters/],
    [["tenant", "create", "never-made", "--sample-size", "lots"], /^admin: --sample-size must be a whole number, got 'lots'$/],
    [["tenant", "create", "never-made", "--sample-size", "8"], /^admin: --sample-size: must be at least 16$/],
    [["tenant", "create", "never-made", "--window-seconds", "30"], /^admin: --window-seconds: must be one of 60, 300, 900, 3600 seconds$/],
    [["tenant", "create", "never-made", "--weight", "flows"], /^admin: --weight: /],
    [["tenant", "create", "never-made", "--retention-days", "0"], /^admin: --retention-days: /],
    [["tenant", "create", "never-made", "--retention-days", "30", "--hourly-retention-days", "7"], /^admin: --hourly-retention-days: must be at least the fine-window days/],
    [["tenant", "create", "never-made", "--colour", "red"], /^admin: 'tenant create' has no option --colour$/],
    [["tenant", "create", "never-made", "--name"], /^admin: .*--name/],
    [["tenant", "create"], /^admin: 'tenant create' needs <slug>$/],
    [["tenant", "list", "extra"], /^admin: 'tenant list': unexpected argument 'extra'$/],
    [["key", "create", "nobody", "router-1"], /^admin: no tenant 'nobody'/],
    [["key", "create", "taken", "bad name"], /^admin: <collector>: must be 1–64 letters/],
    [["key", "create", "taken", "router-1", "--scope", "admin"], /^admin: --scope must be ingest, query or both, got 'admin'$/],
    [["key", "list", "nobody"], /^admin: no tenant 'nobody'/],
    [["key", "revoke", "weir_00000000"], /^admin: no key with prefix weir_00000000$/],
    [["key", "revoke", "router-1"], /^admin: <prefix> must look like weir_1a2b3c4d/],
  ])("exits 2 with one line on stderr for %j", async ([args, message], { expect }) => {
    const result = await run(...args);
    expect(result.code).toBe(2);
    expect(result.stdout).toBe("");
    expect(result.stderr.endsWith("\n") && !result.stderr.trimEnd().includes("\n"), result.stderr).toBe(true);
    expect(result.stderr.trimEnd()).toMatch(message);
    expect(await findTenantBySlug(db, "never-made")).toBeUndefined();
  });

  it("answers an unknown command, or none, with the usage text and exit 2", async () => {
    const unknown = await run("tenant", "delete", "taken");
    expect(unknown.code).toBe(2);
    expect(unknown.stderr).toMatch(/^admin: unknown command 'tenant delete'\n\nUsage: npm run admin -- <command>/);
    const none = await run();
    expect(none.code).toBe(2);
    expect(none.stderr).toMatch(/^Usage: npm run admin -- <command>/);
    expect(await findTenantBySlug(db, "taken")).toBeDefined();
  });

  it("prints the usage on stdout for --help, exit 0", async () => {
    for (const args of [["--help"], ["key", "create", "--help"]]) {
      const help = await run(...args);
      expect(help.code).toBe(0);
      expect(help.stdout).toMatch(/^Usage: npm run admin -- <command>/);
      expect(help.stdout).toContain("key revoke <prefix>");
    }
  });

  it("says so when there are no tenants yet", async () => {
    const emptyDir = mkdtempSync(join(tmpdir(), "weir-admin-empty-"));
    try {
      const listed = await admin(`file:${join(emptyDir, "weir.db")}`, ["tenant", "list"]);
      expect(listed.code).toBe(0);
      expect(listed.stdout).toMatch(/^No tenants yet/);
    } finally {
      rmSync(emptyDir, { recursive: true, force: true });
    }
  });
});
