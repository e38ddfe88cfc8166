// A Weir server in its own process for the benchmark, so the load generator
// does not share its event loop. Prints a marker line with the URL (and, with
// BENCH_COLLECT=1, the IPFIX UDP port of its listener) when ready.
import { startServer } from "~/server/app.server";
import { parseEnv } from "~/env.server";

const collect = process.env.BENCH_COLLECT === "1";
const server = await startServer({
  env: parseEnv({ ...process.env, NODE_ENV: "development", HOST: "127.0.0.1", PORT: "0", IPFIX_UDP_PORT: "0", NETFLOW_UDP_PORT: "0", IPFIX_TCP_PORT: "0", LOG_LEVEL: "silent" }),
  // The listener on a free port; the benchmark claims 127.0.0.1 for its collector beforehand.
  collect: collect ? { ipfixUdpPort: 0 } : undefined,
});
process.stdout.write(`WEIR_BENCH_READY ${server.url}${collect ? ` ${server.collection.ports.ipfixUdp}` : ""}\n`);
process.once("SIGTERM", () => void server.close().then(() => process.exit(0)));
