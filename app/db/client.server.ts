import { mkdirSync } from "node:fs";
import { dirname } from "node:path";
import { createClient, type Client } from "@libsql/client";
import { drizzle, type LibSQLDatabase } from "drizzle-orm/libsql";
import { loadEnv } from "../env.server";
import * as schema from "./schema.server";

export type Db = LibSQLDatabase<typeof schema> & { $client: Client };

const BUSY_TIMEOUT_MS = 5000;

/** The path of a local `file:` database, or null for remote URLs and in-memory databases. */
export function localDatabasePath(url: string): string | null {
  if (!url.startsWith("file:")) return null;
  let path = url.slice("file:".length).split("?")[0];
  if (path.startsWith("//")) path = path.slice(2).replace(/^localhost/, "");
  path = decodeURIComponent(path);
  return path === "" || path === ":memory:" ? null : path;
}

/**
 * Opens a database: an embedded SQLite file for `file:` URLs, or a remote libSQL server
 * (`libsql:`, `https:`, `wss:`) shared by several Weir nodes.
 */
export async function createDb(url: string, authToken?: string): Promise<Db> {
  const path = localDatabasePath(url);
  if (path) mkdirSync(dirname(path), { recursive: true });

  // `timeout` is the busy timeout, applied by the client to every pooled connection.
  const client = createClient({ url, authToken, timeout: BUSY_TIMEOUT_MS });
  if (path) {
    try {
      await configureLocalFile(client);
    } catch (error) {
      client.close();
      throw error;
    }
  }
  return drizzle(client, { schema });
}

/**
 * WAL lets readers (console queries) run while an ingest batch commits. It is a property of
 * the database file, so setting it once through any connection is enough.
 *
 * `synchronous` and `foreign_keys` are per connection, and @libsql/client keeps a pool of
 * connections it opens on demand with no hook to configure them, so a PRAGMA sent through
 * `execute` would reach only one of them. libsql opens every connection with
 * synchronous=FULL (an acknowledged ingest batch survives power loss, WAL or not) and
 * foreign_keys=ON; check that here so a libsql upgrade that changes either fails loudly
 * instead of silently weakening durability or integrity.
 */
async function configureLocalFile(client: Client): Promise<void> {
  await client.execute("PRAGMA journal_mode = WAL");
  const synchronous = (await client.execute("PRAGMA synchronous")).rows[0]?.[0];
  const foreignKeys = (await client.execute("PRAGMA foreign_keys")).rows[0]?.[0];
  const FULL = 2;
  if (Number(synchronous) !== FULL || Number(foreignKeys) !== 1) {
    throw new Error(
      `libsql connections opened with synchronous=${synchronous}, foreign_keys=${foreignKeys}; ` +
        "Weir needs synchronous=2 (FULL) and foreign_keys=1 on every connection",
    );
  }
}

export function closeDb(db: Db): void {
  db.$client.close();
}

let defaultDb: Promise<Db> | undefined;

/**
 * The process-wide handle for scripts, opened on first use from the validated environment.
 * The web server opens its own in `startServer` and hands it to routes through the load
 * context, because route modules run in a separate module graph (Vite's in development,
 * the server bundle in production) where a module-level handle would be a second one.
 */
export function getDb(): Promise<Db> {
  if (!defaultDb) {
    const env = loadEnv();
    defaultDb = createDb(env.DATABASE_URL, env.DATABASE_AUTH_TOKEN);
  }
  return defaultDb;
}

export async function closeDefaultDb(): Promise<void> {
  if (!defaultDb) return;
  const db = defaultDb;
  defaultDb = undefined;
  closeDb(await db);
}
