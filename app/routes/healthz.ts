import { sql } from "drizzle-orm";
import type { Route } from "./+types/healthz";

// For load balancers and uptime checks: 200 only when this node can reach its database and,
// when it has IPFIX/NetFlow listeners, their decode worker runs. The listeners' counters ride along.
export async function loader({ context }: Route.LoaderArgs) {
  const headers = { "Cache-Control": "no-store" };
  const node = context.env.NODE_ID;
  const collection = context.collection.health();
  try {
    await context.db.run(sql`select 1`);
  } catch (error) {
    context.logger.error({ err: error }, "health check: database unreachable");
    return Response.json({ ok: false, node, db: "error", collection }, { status: 503, headers });
  }
  return Response.json({ ok: collection.healthy, node, db: "ok", collection }, { status: collection.healthy ? 200 : 503, headers });
}
