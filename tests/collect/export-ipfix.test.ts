// `npm run export-ipfix`: the demo's IPFIX exporter. Its file is read by a reference decoder
// (Debian's ipfixDump, libfixbuf) and by Weir; its UDP export feeds a claimed collector.
import { execFile } from "node:child_process";
import { mkdtempSync, readFileSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { fileURLToPath } from "node:url";
import { promisify } from "node:util";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { claimExporter } from "~/exporters/claims.server";
import { IPFIXDUMP } from "../global-setup";
import { postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";
import { waitFor } from "./helpers";

const run = promisify(execFile);
const SCRIPT = fileURLToPath(new URL("../../scripts/export-ipfix.ts", import.meta.url));
const exporter = (...args: string[]) => run(process.execPath, ["--import", "tsx", SCRIPT, ...args], { timeout: 60_000 });

describe("npm run export-ipfix", () => {
  let dir: string;
  let t: TestServer;
  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), "weir-export-ipfix-"));
    t = await startTestServer({ collect: { ipfixUdpPort: 0, flushMs: 50 } });
  });
  afterAll(async () => {
    await t?.close();
    rmSync(dir, { recursive: true, force: true });
  });

  it("writes an IPFIX file (RFC 5655) that ipfixDump reads record for record and Weir stores whole", async () => {
    const path = join(dir, "demo.ipfix");
    await exporter("--file", path, "--records", "260");
    const { stdout } = await run(IPFIXDUMP, ["-i", path], { maxBuffer: 64 * 1024 * 1024 });
    // ipfixDump's closing summary line: "… N Messages, R Data Records, T Template Records …"
    expect(stdout).toMatch(/11 Messages, 260 Data Records/);
    const x = await tenantWithKey(t.server, "export-file", { sampleSize: 1024 });
    const res = await postFlows(t.url, x.key, new Uint8Array(readFileSync(path)), { "content-type": "application/ipfix" });
    expect(res.status).toBe(200);
    expect(((await res.json()) as { accepted: number }).accepted).toBe(260);
  });

  it("sends over UDP to a listener, and a claimed loopback address feeds the collector", async () => {
    const x = await tenantWithKey(t.server, "export-udp", { sampleSize: 1024 });
    await claimExporter(t.server.db, { tenantId: x.tenant.id, collector: "lab-probe", cidr: "127.0.0.5", actor: { id: null, label: "test" } });
    await t.server.collection.reloadClaims();
    const { stdout } = await exporter("--to", `127.0.0.1:${t.server.collection.ports.ipfixUdp}`, "--from", "127.0.0.5", "--rate", "300", "--duration", "1");
    const sent = Number(/Sent ([\d,]+) flow records/.exec(stdout)![1].replace(/,/g, ""));
    expect(sent).toBeGreaterThan(0);
    const stored = async () => {
      const { rows } = await t.server.db.$client.execute({ sql: "SELECT coalesce(sum(records), 0) AS n FROM reservoirs WHERE tenant_id = ?", args: [x.tenant.id] });
      return Number(rows[0].n);
    };
    await waitFor(async () => {
      await t.server.collection.drain();
      return (await stored()) >= sent;
    }, `${sent} records stored`);
    expect(await stored()).toBe(sent);
  });

  it("refuses bad options with exit status 2 and a line saying why", async () => {
    await expect(exporter("--to", "nowhere")).rejects.toMatchObject({ code: 2, stderr: expect.stringMatching(/--to must be ADDRESS:PORT/) });
    await expect(exporter("--file", join(dir, "x.ipfix"), "--to", "127.0.0.1:4739")).rejects.toMatchObject({ code: 2 });
  });
});
