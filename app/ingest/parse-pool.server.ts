import { Worker } from "node:worker_threads";
import type { Logger } from "~/logger.server";
import { parseFlowBody, type FlowBodyParser, type ParseJob, type ParseOutcome } from "./body.server";

/** What a parse worker posts back: once `ready` after loading, then one answer per job. */
export type ParseWorkerReply = { ready: true } | { outcome: ParseOutcome } | { failure: string };

export interface ParsePoolOptions {
  /** Worker threads; 0 parses in the calling thread (simpler to debug and profile). */
  size: number;
  logger: Logger;
  /** The worker script; tests substitute one that can be made to crash. */
  workerUrl?: URL;
  /**
   * Bytes of bodies that may wait for a worker; a body beyond is refused with ParsePoolFull
   * (the API answers 503) rather than held, so overload cannot exhaust memory. Default 256 MiB.
   */
  maxQueuedBytes?: number;
}

/** The parse queue holds as many bytes as it may: the caller should retry later. */
export class ParsePoolFull extends Error {
  constructor(readonly maxQueuedBytes: number) {
    super(`the parse queue holds its limit of ${maxQueuedBytes} bytes`);
    this.name = "ParsePoolFull";
  }
}

const DEFAULT_MAX_QUEUED_BYTES = 256 * 1024 * 1024;

interface Task {
  job: ParseJob;
  resolve(outcome: ParseOutcome): void;
  reject(error: Error): void;
}

interface Slot {
  worker: Worker;
  ready: boolean;
  task?: Task;
}

const WORKER_URL = new URL("./parse-worker-entry.mjs", import.meta.url);

/**
 * A few worker threads that decode and validate ingest bodies (gunzip, UTF-8, JSON,
 * record checks: about 3 µs a record), so the main thread is left with HTTP, the
 * reservoir updates and the SQLite commit. Bodies go in and packed rows come back as
 * transferred ArrayBuffers: structured-cloning thousands of record objects would cost
 * about as much as parsing them.
 *
 * Each worker holds one job at a time and the rest wait in one queue, so a large body
 * never holds up a small one behind it while another worker is idle. A worker that dies
 * fails only its own job (the request answers 500) and is replaced.
 */
export class ParsePool implements FlowBodyParser {
  private readonly slots: Slot[] = [];
  private readonly queue: Task[] = [];
  private queuedBytes = 0;
  private closed = false;

  private constructor(private readonly options: ParsePoolOptions) {}

  /** Starts the workers and resolves once each has loaded its code, so a broken set-up fails at start-up. */
  static async start(options: ParsePoolOptions): Promise<ParsePool> {
    const pool = new ParsePool(options);
    try {
      await Promise.all(Array.from({ length: options.size }, () => pool.spawn()));
    } catch (error) {
      await pool.close();
      throw error;
    }
    return pool;
  }

  /** Worker threads running now (0 once closed, or when parsing in the calling thread). */
  get workers(): number {
    return this.slots.length;
  }

  parse(job: ParseJob): Promise<ParseOutcome> {
    if (this.closed) return Promise.reject(new Error("the parse pool is closed"));
    if (this.options.size === 0) return parseFlowBody(job);
    if (this.slots.length === 0) return Promise.reject(new Error("no parse worker is running"));
    const limit = this.options.maxQueuedBytes ?? DEFAULT_MAX_QUEUED_BYTES;
    const idle = this.slots.some((slot) => !slot.task);
    // An idle worker takes the body at once; otherwise it waits, within the limit.
    if (!idle && this.queue.length > 0 && this.queuedBytes + job.body.byteLength > limit) return Promise.reject(new ParsePoolFull(limit));
    return new Promise((resolve, reject) => {
      this.queue.push({ job, resolve, reject });
      this.queuedBytes += job.body.byteLength;
      this.dispatch();
    });
  }

  /** Fails waiting jobs and stops the workers; call after the HTTP server has drained. */
  async close(): Promise<void> {
    this.closed = true;
    for (const task of this.queue.splice(0)) task.reject(new Error("the parse pool is closed"));
    this.queuedBytes = 0;
    await Promise.all(this.slots.map((slot) => slot.worker.terminate()));
  }

  private spawn(): Promise<void> {
    // The entry registers tsx itself; the parent's flags (vitest's, say) are no business of the worker's.
    const worker = new Worker(this.options.workerUrl ?? WORKER_URL, { execArgv: [] });
    const slot: Slot = { worker, ready: false };
    this.slots.push(slot);
    return new Promise((resolve, reject) => {
      let fault: Error | undefined;
      worker.on("message", (reply: ParseWorkerReply) => {
        if ("ready" in reply) {
          slot.ready = true;
          resolve();
          return;
        }
        const task = slot.task!;
        slot.task = undefined;
        if ("outcome" in reply) task.resolve(reply.outcome);
        else task.reject(new Error(`parse worker failed: ${reply.failure}`));
        this.dispatch();
      });
      worker.on("error", (error) => {
        fault = error;
        this.options.logger.error({ err: error, threadId: worker.threadId }, "parse worker crashed");
      });
      worker.on("exit", (code) => {
        this.slots.splice(this.slots.indexOf(slot), 1);
        const error = fault ?? new Error(`parse worker exited with code ${code}`);
        slot.task?.reject(error);
        if (!slot.ready) reject(error);
        if (this.closed) return;
        if (!fault) this.options.logger.error({ code, threadId: worker.threadId }, "parse worker exited");
        // A worker that never got ready would only die again; one that did is replaced.
        if (slot.ready) this.spawn().catch((err: unknown) => this.options.logger.error({ err }, "parse worker could not be replaced"));
        if (this.slots.length === 0) {
          for (const task of this.queue.splice(0)) task.reject(error);
          this.queuedBytes = 0;
        } else this.dispatch();
      });
    });
  }

  private dispatch(): void {
    for (const slot of this.slots) {
      if (this.queue.length === 0) return;
      if (slot.task) continue;
      const task = this.queue.shift()!;
      this.queuedBytes -= task.job.body.byteLength;
      slot.task = task;
      let { body } = task.job;
      // A transfer moves the whole ArrayBuffer: a body that is a view into a larger one is copied
      // first, or the caller's other views of that memory would be detached.
      if (body.byteOffset !== 0 || body.byteLength !== body.buffer.byteLength) body = body.slice();
      slot.worker.postMessage({ ...task.job, body }, [body.buffer]);
    }
  }
}
