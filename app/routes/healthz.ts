import { sql } from "drizzle-orm";
import type { Route } from "./+types/healthz";

// For load balancers and uptime checks: 200 only when this node can reach its database.
export async function loader({ context }: Route.LoaderArgs) {
  const headers = { "Cache-Control": "no-store" };
  const node = context.env.NODE_ID;
  try {
    await context.db.run(sql`select 1`);
  } catch (error) {
    context.logger.error({ err: error }, "health check: database unreachable");
    return Response.json({ ok: false, node, db: "error" }, { status: 503, headers });
  }
  return Response.json({ ok: true, node, db: "ok" }, { headers });
}
