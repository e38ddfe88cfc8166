// Child process for the crash test: a Weir server with a seeded uniform source,
// so the parent can rebuild the exact reservoirs it must have stored.
import { parseEnv } from "~/env.server";
import { seededUniform } from "~/sampling/uniform";
import { startServer } from "~/server/app.server";

const server = await startServer({
  // Invented records of a fixed date: accepted however old they are when the test runs.
  env: parseEnv({ ...process.env, NODE_ENV: "development", HOST: "127.0.0.1", PORT: "0", LOG_LEVEL: "silent", INGEST_REFUSE_EXPIRED: "false" }),
  uniform: seededUniform(Number(process.env.WEIR_TEST_SEED)),
});
// Other output (dev-server notices) may come first; the parent waits for this marker.
process.stdout.write(`WEIR_CHILD_READY ${server.url}\n`);
