// Shared by the merge tests: invented flows and the stored reservoirs of a collector, read
// straight from SQLite (not through the code under test).
import type { Client } from "@libsql/client";
import { decodeKeptRow, KEPT_ROW_BYTES, type KeptRowValue } from "~/ingest/kept-codec";
import { seededUniform } from "~/sampling/uniform";

export const WINDOW_MS = 300_000;

export interface FlowJson {
  src: string;
  dst: string;
  sport: number;
  dport: number;
  proto: number;
  bytes: number;
  packets: number;
  start: number;
  end: number;
}

/**
 * Invented heavy-tailed flows in documentation space (RFC 5737): Pareto bytes of shape 1.2
 * (a few flows carry most bytes), all starting inside the window at `windowStart`. `net`
 * is the first three octets of the source network, so two streams can be told apart.
 */
export function flows(seed: number, count: number, windowStart: number, net: "198.51.100" | "203.0.113" | "192.0.2"): FlowJson[] {
  const u = seededUniform(seed);
  return Array.from({ length: count }, (_, i) => {
    const bytes = Math.max(40, Math.round(40 / Math.pow(u(), 1 / 1.2)));
    const start = windowStart + Math.floor(u() * (WINDOW_MS - 1000));
    return {
      src: `${net}.${1 + (i % 250)}`,
      dst: i % 3 === 0 ? "203.0.113.80" : "192.0.2.53",
      // Distinct ports keep every flow key of a stream distinct (one coordinated draw per flow).
      sport: 1024 + i,
      dport: [443, 80, 53][i % 3],
      proto: i % 3 === 2 ? 17 : 6,
      bytes,
      packets: Math.max(1, Math.ceil(bytes / 1400)),
      start,
      end: start + 500,
    };
  });
}

export interface StoredReservoir {
  windowStart: number;
  windowSeconds: number;
  node: string;
  k: number;
  tau: number;
  records: number;
  bytes: bigint;
  packets: bigint;
  /** Highest priority first. */
  kept: KeptRowValue[];
}

/** Every stored reservoir of one collector of a tenant, with its kept rows decoded. */
export async function storedReservoirs(client: Client, tenantId: number, collector: string): Promise<StoredReservoir[]> {
  const found = await client.execute({
    sql:
      "SELECT r.id, r.window_start, r.window_seconds, r.node, r.k, r.tau, r.records, r.bytes, r.packets FROM reservoirs r " +
      "JOIN collectors c ON c.id = r.collector_id WHERE r.tenant_id = ? AND c.name = ? AND r.records > 0 ORDER BY r.window_start, r.node",
    args: [tenantId, collector],
  });
  const out: StoredReservoir[] = [];
  for (const row of found.rows) {
    const kept = await client.execute({ sql: "SELECT data FROM kept_records WHERE reservoir_id = ?", args: [row[0]] });
    out.push({
      windowStart: Number(row[1]),
      windowSeconds: Number(row[2]),
      node: String(row[3]),
      k: Number(row[4]),
      tau: Number(row[5]),
      records: Number(row[6]),
      bytes: BigInt(String(row[7])),
      packets: BigInt(String(row[8])),
      kept: kept.rows
        .map((r) => {
          const data = new Uint8Array(r[0] as ArrayBuffer);
          if (data.byteLength !== KEPT_ROW_BYTES) throw new Error("a kept row has the wrong size");
          return decodeKeptRow(data);
        })
        .sort((a, b) => b.priority - a.priority),
    });
  }
  return out;
}

/**
 * The merge rule of Duffield, Lund, Thorup (J. ACM 54(6), 2007), written out here as the
 * reference: k_m = min(k wanted, every input k); keep the k_m highest priorities of the
 * union of kept records; τ = the (k_m+1)-th largest among those priorities and every input τ_j.
 */
export function dltMerge(inputs: { k: number; tau: number; kept: { priority: number }[] }[], kWanted: number): { k: number; tau: number; priorities: number[] } {
  const k = Math.min(kWanted, ...inputs.map((i) => i.k));
  const all = inputs.flatMap((i) => i.kept.map((e) => e.priority)).sort((a, b) => b - a);
  const withTaus = [...all, ...inputs.map((i) => i.tau)].sort((a, b) => b - a);
  return { k, tau: withTaus.length > k ? withTaus[k] : 0, priorities: all.slice(0, k) };
}
