import { fileURLToPath } from "node:url";
import { migrate } from "drizzle-orm/libsql/migrator";
import type { Db } from "./client.server";

/**
 * Resolved from this file rather than the working directory so migrations run from any
 * cwd. This only holds while the module runs from source (server.ts and scripts load it
 * through tsx); no route imports it, so it never lands in the server bundle.
 */
export const MIGRATIONS_FOLDER = fileURLToPath(new URL("../../drizzle", import.meta.url));

/** Applies every migration in `drizzle/` not yet recorded in the database. */
export async function runMigrations(db: Db): Promise<void> {
  await migrate(db, { migrationsFolder: MIGRATIONS_FOLDER });
}
