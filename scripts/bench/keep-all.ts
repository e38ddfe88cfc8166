// The baseline a user would otherwise pick: keep every record in a plain SQLite
// table and sum exactly.
import { createClient, type Client, type InValue } from "@libsql/client";
import type { FlowRecord } from "~/flow/record";

const COLUMNS = "src, dst, sport, dport, proto, bytes, packets, start_ms, end_ms, ingress_interface, egress_interface, src_as, dst_as";
const ROWS_PER_INSERT = 1000;

export async function openKeepAll(path: string): Promise<Client> {
  const client = createClient({ url: `file:${path}` });
  await client.execute("PRAGMA journal_mode = WAL");
  await client.execute(
    "CREATE TABLE IF NOT EXISTS flows (src BLOB NOT NULL, dst BLOB NOT NULL, sport INTEGER NOT NULL, dport INTEGER NOT NULL, proto INTEGER NOT NULL, bytes INTEGER NOT NULL, packets INTEGER NOT NULL, start_ms INTEGER, end_ms INTEGER, ingress_interface INTEGER, egress_interface INTEGER, src_as INTEGER, dst_as INTEGER)",
  );
  return client;
}

/** Inserts one batch in one transaction, as an ingest endpoint keeping everything would. */
export async function insertAll(client: Client, records: readonly FlowRecord[]): Promise<void> {
  const statements = [];
  for (let i = 0; i < records.length; i += ROWS_PER_INSERT) {
    const chunk = records.slice(i, i + ROWS_PER_INSERT);
    const args: InValue[] = [];
    for (const r of chunk) {
      args.push(r.src, r.dst, r.sport, r.dport, r.proto, Number(r.bytes), Number(r.packets), r.start, r.end, r.ingressInterface, r.egressInterface, r.srcAs, r.dstAs);
    }
    statements.push({ sql: `INSERT INTO flows (${COLUMNS}) VALUES ${chunk.map(() => "(?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)").join(", ")}`, args });
  }
  await client.batch(statements, "write");
}
