// IPFIX over UDP on loopback, end to end: a sender offers a steady rate of realistic messages
// (the decode benchmark's 15-field template, 30 records a message) to a Weir server in its own
// process whose listener's exporter is claimed; the records the server stored (exact counters
// of its reservoirs) are compared with the records sent, rate after rate.
import { createSocket } from "node:dgram";
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { closeDb, createDb, type Db } from "~/db/client.server";
import { runMigrations } from "~/db/migrate.server";
import { claimExporter } from "~/exporters/claims.server";
import { seededUniform } from "~/sampling/uniform";
import { createTenant } from "~/tenants.server";
import { ipfixMessage, type Value } from "../ipfix/encode";
import { FIELDS } from "./ipfix-decode";
import { startChildServer } from "./util";

export interface CollectStep {
  offeredPerSecond: number;
  sent: number;
  stored: number;
  /** 1 − stored/sent, in percent. */
  lossPercent: number;
  /** Records stored per second of sending. */
  storedPerSecond: number;
  /** Records the exporter's sequence numbers say were lost (what Weir itself reports). */
  reportedLost: number;
}

export interface CollectBench {
  steps: CollectStep[];
  /** The highest offered rate stored with less than 0.1% loss, or null. */
  best: CollectStep | null;
  recordsPerMessage: number;
  bytesPerMessage: number;
}

const RECORDS_PER_MESSAGE = 30;
const POOL_MESSAGES = 2000;
const TEMPLATE_EVERY = 50;

/** A pool of messages from one exporter (invented traffic on RFC 5737 prefixes, heavy-tailed sizes), resent in a cycle. */
function messagePool(startMs: number): Uint8Array[] {
  const u = seededUniform(7);
  const pick = (n: number) => Math.floor(u() * n);
  const prefixes = ["192.0.2.", "198.51.100.", "203.0.113."];
  return Array.from({ length: POOL_MESSAGES }, (_, m) => {
    const records: Value[][] = Array.from({ length: RECORDS_PER_MESSAGE }, () => {
      const packets = Math.max(1, Math.floor(1 / Math.pow(u(), 1 / 1.2))); // Pareto, shape 1.2
      const start = startMs + pick(60_000);
      return [prefixes[pick(3)] + (1 + pick(254)), prefixes[pick(3)] + (1 + pick(254)), 1024 + pick(60000), [443, 80, 53, 22][pick(4)], 6, 0, 0x18,
        1 + pick(48), 1 + pick(48), 64496 + pick(16), 64496 + pick(16), packets * (40 + pick(1460)), packets, start, start + pick(5000)];
    });
    return ipfixMessage({
      exportTime: Math.floor(startMs / 1000) + 60,
      sequence: 0, // set when sent
      domain: 1,
      sets: [...(m % TEMPLATE_EVERY === 0 ? [{ templates: [{ id: 256, fields: FIELDS }] }] : []), { templateId: 256, fields: FIELDS, records }],
    });
  });
}

async function storedRecords(db: Db): Promise<{ records: number; lost: number }> {
  const [r, e] = await Promise.all([
    db.$client.execute("SELECT coalesce(sum(records), 0) AS n FROM reservoirs"),
    db.$client.execute("SELECT coalesce(sum(lost), 0) AS n FROM exporters"),
  ]);
  return { records: Number(r.rows[0].n), lost: Number(e.rows[0].n) };
}

/** Waits until the stored count stops growing (the listener flushes at least once a second). */
async function settle(db: Db, expected: number): Promise<{ records: number; lost: number }> {
  let last = await storedRecords(db);
  let still = 0;
  for (let i = 0; i < 200 && last.records < expected && still < 12; i++) {
    await new Promise((resolve) => setTimeout(resolve, 250));
    const now = await storedRecords(db);
    still = now.records === last.records ? still + 1 : 0;
    last = now;
  }
  // Statistics (lost) are written every 5 s.
  await new Promise((resolve) => setTimeout(resolve, 5500));
  return storedRecords(db);
}

/** Sends `seconds` of messages at `recordsPerSecond`, paced against the clock. */
async function offer(pool: Uint8Array[], port: number, recordsPerSecond: number, seconds: number, sequence: { next: number }): Promise<number> {
  const socket = createSocket({ type: "udp4", sendBufferSize: 8 * 1024 * 1024 });
  await new Promise<void>((resolve) => socket.bind(0, "127.0.0.1", resolve));
  const total = Math.floor((recordsPerSecond * seconds) / RECORDS_PER_MESSAGE);
  const perMs = recordsPerSecond / RECORDS_PER_MESSAGE / 1000;
  const t0 = performance.now();
  let sent = 0;
  let inFlight = 0;
  while (sent < total) {
    const due = Math.min(total, Math.floor((performance.now() - t0) * perMs) + 1);
    while (sent < due) {
      const message = Buffer.from(pool[sent % pool.length]);
      message.writeUInt32BE(sequence.next >>> 0, 8); // RFC 7011 §3.1: data records sent before this message
      sequence.next += RECORDS_PER_MESSAGE;
      inFlight++;
      socket.send(message, port, "127.0.0.1", () => inFlight--);
      sent++;
    }
    // A timer, not setImmediate: a spinning sender would take a core from the server it measures.
    await new Promise((resolve) => setTimeout(resolve, 1));
  }
  while (inFlight > 0) await new Promise((resolve) => setTimeout(resolve, 1));
  await new Promise<void>((resolve) => socket.close(() => resolve()));
  return sent * RECORDS_PER_MESSAGE;
}

export async function benchCollect(rates = [250_000, 500_000, 750_000, 1_000_000, 1_500_000], seconds = 4): Promise<CollectBench> {
  const dir = mkdtempSync(join(tmpdir(), "weir-bench-collect-"));
  try {
    const url = `file:${join(dir, "weir.db")}`;
    const setup = await createDb(url);
    await runMigrations(setup);
    const tenant = await createTenant(setup, { slug: "bench", sampleSize: 1024, windowSeconds: 300 });
    await claimExporter(setup, { tenantId: tenant.id, collector: "router-1", cidr: "127.0.0.1", actor: { id: null, label: "bench" } });
    closeDb(setup);

    const pool = messagePool(Date.now() - 120_000);
    const server = await startChildServer(url, { collect: true });
    const db = await createDb(url);
    const steps: CollectStep[] = [];
    const sequence = { next: 0 };
    try {
      let before = await storedRecords(db);
      for (const rate of rates) {
        const sent = await offer(pool, server.udpPort!, rate, seconds, sequence);
        const after = await settle(db, before.records + sent);
        const stored = after.records - before.records;
        steps.push({
          offeredPerSecond: rate,
          sent,
          stored,
          lossPercent: (100 * (sent - stored)) / sent,
          storedPerSecond: stored / seconds,
          reportedLost: after.lost - before.lost,
        });
        before = after;
        if (steps.at(-1)!.lossPercent > 2) break;
      }
    } finally {
      closeDb(db);
      await server.stop();
    }
    const lossless = steps.filter((s) => s.lossPercent < 0.1);
    return { steps, best: lossless.at(-1) ?? null, recordsPerMessage: RECORDS_PER_MESSAGE, bytesPerMessage: pool[1].byteLength };
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
}
