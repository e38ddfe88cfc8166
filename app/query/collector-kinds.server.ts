import type { Db } from "~/db/client.server";
import type { CollectorInfo } from "./collector-rule";

/**
 * The tenant's copies (collectors filled by sample-file imports: collectors.copy_of) and
 * merges, with what they hold samples of — the collectors the question rule of
 * collector-rule.ts must know about; every other collector is a plain stream.
 */
export async function copiesAndMerges(db: Db, tenantId: number): Promise<CollectorInfo[]> {
  const found = await db.$client.execute({
    sql: "SELECT c.name, c.kind, c.copy_of, m.inputs FROM collectors c LEFT JOIN merges m ON m.collector_id = c.id WHERE c.tenant_id = ? AND (c.kind = 'merge' OR c.copy_of IS NOT NULL)",
    args: [tenantId],
  });
  return found.rows.map((row) =>
    String(row[1]) === "merge"
      ? { name: String(row[0]), kind: "merge" as const, of: row[3] === null ? [] : (JSON.parse(String(row[3])) as string[]) }
      : { name: String(row[0]), kind: "copy" as const, of: JSON.parse(String(row[2])) as string[] },
  );
}
