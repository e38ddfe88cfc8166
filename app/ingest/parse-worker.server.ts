// A parse-pool worker thread (see parse-pool.server.ts): decodes and validates one body
// at a time and hands the packed rows back by transfer, not by copy.
import { parentPort } from "node:worker_threads";
import { parseFlowBody, type ParseJob } from "./body.server";
import type { ParseWorkerReply } from "./parse-pool.server";

const port = parentPort!;
const reply = (message: ParseWorkerReply, transfer: ArrayBuffer[] = []) => port.postMessage(message, transfer);

port.on("message", (job: ParseJob) => {
  parseFlowBody(job).then(
    (outcome) => reply({ outcome }, outcome.ok ? [outcome.packed.rows.buffer] : []),
    (error: unknown) => reply({ failure: error instanceof Error ? (error.stack ?? error.message) : String(error) }),
  );
});
reply({ ready: true });
