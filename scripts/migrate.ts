// Applies pending migrations to DATABASE_URL (`npm run db:migrate`). The server also
// migrates at start; this is for deploy steps that migrate before rolling nodes.
import { closeDefaultDb, getDb } from "../app/db/client.server";
import { MIGRATIONS_FOLDER, runMigrations } from "../app/db/migrate.server";
import { loadEnv } from "../app/env.server";
import { createLogger } from "../app/logger.server";

const env = loadEnv();
const logger = createLogger(env.LOG_LEVEL);
try {
  await runMigrations(await getDb());
  logger.info({ migrationsFolder: MIGRATIONS_FOLDER }, "migrations applied");
} catch (error) {
  logger.fatal({ err: error }, "migration failed");
  process.exitCode = 1;
} finally {
  await closeDefaultDb();
}
