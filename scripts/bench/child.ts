// A Weir server in its own process for the benchmark, so the load generator
// does not share its event loop. Prints a marker line with the URL when ready.
import { startServer } from "~/server/app.server";
import { parseEnv } from "~/env.server";

const server = await startServer({
  env: parseEnv({ ...process.env, NODE_ENV: "development", HOST: "127.0.0.1", PORT: "0", IPFIX_UDP_PORT: "0", NETFLOW_UDP_PORT: "0", IPFIX_TCP_PORT: "0", LOG_LEVEL: "silent" }),
});
process.stdout.write(`WEIR_BENCH_READY ${server.url}\n`);
process.once("SIGTERM", () => void server.close().then(() => process.exit(0)));
