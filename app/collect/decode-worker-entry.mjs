// Entry of the decode worker thread (decode-worker.server.ts). Node 20 ignores loader flags
// such as `--import tsx` in a Worker's execArgv (nodejs/node#47747, fixed in Node 22.2),
// so the thread registers tsx itself, then loads the TypeScript worker.
import { register } from "tsx/esm/api";

register();
await import("./decode-worker.server.ts");
