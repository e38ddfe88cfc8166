// Entry point: `npm run dev` / `npm start`. Everything else lives in app/server/app.server.ts
// so tests and scripts can start the same server on their own port and database.
import { closeOnSignals, startServer } from "./app/server/app.server";

const server = await startServer().catch((error: unknown) => {
  console.error(error);
  process.exit(1);
});

server.logger.info({ url: server.url, node: server.env.NODE_ID }, `Weir listening on ${server.url}`);

closeOnSignals(server);
