// `npm run replay -- --url URL --key KEY [...]`: live load for a running Weir. Posts flows
// of the INVENTED demo scenario (`scenario.ts`) to POST /api/v1/flows at about a given rate,
// the way a collector would: NDJSON batches, one Idempotency-Key per batch, retries of a
// failed batch under the same key. Bounded: it stops after --duration seconds or on Ctrl-C.
import { randomBytes } from "node:crypto";
import { parseArgs } from "node:util";
import { flowRecordToJson } from "~/flow/record";
import { seededUniform, type UniformSource } from "~/sampling/uniform";
import { DEMO_RIVERLINE_KEY } from "./demo-keys";
import { SITES, findSite, liveFlows, liveSeed, type Site } from "./scenario";

const USAGE = `Usage: npm run replay -- --key KEY [options]

Posts synthetic flows of the demo scenario to POST /api/v1/flows as NDJSON batches,
one Idempotency-Key per batch, at about --rate records per second.

  --url URL          Weir base URL (default http://127.0.0.1:3000)
  --key KEY          an API key with ingest scope. A key belongs to one collector, so
                     give one --key per collector, in the order of --collectors.
  --collectors LIST  comma-separated scenario collectors (default pop-north); one of
                     ${SITES.map((s) => s.collector).join(", ")}. The server files records under
                     the collector of the key they come with.
  --rate N           records per second in all, split over the collectors in proportion
                     to their traffic in the scenario (default 2000, at most 100000)
  --batch N          records per request (default 500, at most 10000)
  --duration S       stop after S seconds (default 60, at most 86400); Ctrl-C stops sooner
  --seed N           seed of the flow generator (default 7)
  --help             show this text

A failed batch (network error, 408, 429 or 5xx) is retried with the same Idempotency-Key
after 0.5, 1, 2, 4 and 8 s, then counted as an error. Any other 4xx answer (bad key,
wrong scope, invalid records) stops the run. A status line is printed every 5 s.
Exit status: 0 when every batch was accepted, 1 otherwise, 2 for bad options.

Example (demo data):
  npm run replay -- --url http://127.0.0.1:3000 --key ${DEMO_RIVERLINE_KEY} --rate 2000`;

const RETRY_DELAYS_MS = [500, 1000, 2000, 4000, 8000];
const REQUEST_TIMEOUT_MS = 30_000;
const STATUS_EVERY_MS = 5000;
// Below a full batch per second, send what is due at least this often so the console stays live.
const FLUSH_EVERY_MS = 1000;
const IDLE_STEP_MS = 20;

class UsageError extends Error {}
/** An answer that retrying cannot fix. */
class FatalError extends Error {}

interface Options {
  endpoint: URL;
  workers: { site: Site; key: string }[];
  rate: number;
  batch: number;
  durationMs: number;
  seed: number;
}

function wholeNumber(text: string | undefined, flag: string, fallback: number, min: number, max: number): number {
  if (text === undefined) return fallback;
  if (!/^\d{1,9}$/.test(text)) throw new UsageError(`--${flag} must be a whole number, got '${text}'`);
  const value = Number(text);
  if (value < min || value > max) throw new UsageError(`--${flag} must be from ${min} to ${max}, got ${value}`);
  return value;
}

function parseOptions(argv: string[]): Options | "help" {
  let values;
  try {
    ({ values } = parseArgs({
      args: argv,
      options: {
        url: { type: "string", default: "http://127.0.0.1:3000" },
        key: { type: "string", multiple: true },
        collectors: { type: "string", default: "pop-north" },
        rate: { type: "string" },
        batch: { type: "string" },
        duration: { type: "string" },
        seed: { type: "string" },
        help: { type: "boolean", short: "h" },
      },
      strict: true,
    }));
  } catch (error) {
    throw new UsageError((error as Error).message);
  }
  if (values.help) return "help";

  let endpoint: URL;
  try {
    endpoint = new URL("/api/v1/flows", values.url);
  } catch {
    throw new UsageError(`--url must be an http or https URL, got '${values.url}'`);
  }
  if (endpoint.protocol !== "http:" && endpoint.protocol !== "https:") throw new UsageError(`--url must be an http or https URL, got '${values.url}'`);

  const names = values.collectors.split(",").map((n) => n.trim()).filter((n) => n !== "");
  const keys = values.key ?? [];
  if (keys.length === 0) throw new UsageError("--key is required (an API key with ingest scope)");
  if (keys.length !== names.length) {
    throw new UsageError(`give one --key per collector: ${names.length} collector(s) (${names.join(", ")}) but ${keys.length} key(s)`);
  }
  const workers = names.map((name, i) => {
    const site = findSite(name);
    if (!site) throw new UsageError(`unknown scenario collector '${name}' (one of ${SITES.map((s) => s.collector).join(", ")})`);
    return { site, key: keys[i] };
  });
  return {
    endpoint,
    workers,
    rate: wholeNumber(values.rate, "rate", 2000, 1, 100_000),
    batch: wholeNumber(values.batch, "batch", 500, 1, 10_000),
    durationMs: wholeNumber(values.duration, "duration", 60, 1, 86_400) * 1000,
    seed: wholeNumber(values.seed, "seed", 7, 0, 2 ** 31),
  };
}

// ---- sending -----------------------------------------------------------------------------

const stats = { sent: 0, accepted: 0, duplicates: 0, retries: 0, errors: 0 };
let lastError: string | undefined;
let fatal: string | undefined;
let stopping = false;

const sleep = (ms: number) => new Promise((resolve) => setTimeout(resolve, ms));

function retryable(status: number): boolean {
  return status === 408 || status === 429 || status >= 500;
}

/** Posts one batch, retrying under the same Idempotency-Key so a batch that did arrive counts once. */
async function postBatch(endpoint: URL, key: string, idempotencyKey: string, body: string, records: number): Promise<void> {
  stats.sent += records;
  for (let attempt = 0; ; attempt++) {
    let problem: string;
    try {
      const res = await fetch(endpoint, {
        method: "POST",
        headers: { authorization: `Bearer ${key}`, "content-type": "application/x-ndjson", "idempotency-key": idempotencyKey },
        body,
        signal: AbortSignal.timeout(REQUEST_TIMEOUT_MS),
      });
      const text = await res.text();
      if (res.ok) {
        const answer = JSON.parse(text) as { accepted: number; duplicate: boolean };
        stats.accepted += answer.accepted;
        if (answer.duplicate) stats.duplicates++;
        return;
      }
      problem = `HTTP ${res.status}: ${text.slice(0, 300)}`;
      if (!retryable(res.status)) throw new FatalError(problem);
    } catch (error) {
      if (error instanceof FatalError) throw error;
      problem = (error as Error).message;
    }
    // After Ctrl-C, a batch still failing is given up rather than keeping the user waiting.
    if (attempt >= RETRY_DELAYS_MS.length || stopping) {
      stats.errors++;
      lastError = problem;
      return;
    }
    stats.retries++;
    await sleep(RETRY_DELAYS_MS[attempt]);
  }
}

/**
 * One collector's loop: keeps the records sent on pace with `rate`, in batches of at most
 * `batch`. When the server is slower than the rate, batches go back to back.
 */
async function runWorker(options: Options, site: Site, key: string, rate: number, startedAt: number, runId: string): Promise<void> {
  const u: UniformSource = seededUniform(liveSeed(options.seed, site.collector));
  let generated = 0;
  let batchNo = 0;
  let lastSend = startedAt;
  while (!stopping) {
    const now = Date.now();
    const elapsed = now - startedAt;
    if (elapsed >= options.durationMs) break;
    const due = Math.floor((rate * elapsed) / 1000) - generated;
    if (due >= options.batch || (due > 0 && now - lastSend >= FLUSH_EVERY_MS)) {
      const records = liveFlows(site, Math.min(due, options.batch), now, u);
      generated += records.length;
      lastSend = now;
      const body = records.map((r) => JSON.stringify(flowRecordToJson(r))).join("\n") + "\n";
      try {
        await postBatch(options.endpoint, key, `replay-${runId}-${site.collector}-${batchNo++}`, body, records.length);
      } catch (error) {
        if (!(error instanceof FatalError)) throw error;
        fatal = `${site.collector}: ${error.message}`;
        stopping = true;
      }
    } else {
      await sleep(IDLE_STEP_MS);
    }
  }
}

function statusLine(startedAt: number): string {
  const seconds = (Date.now() - startedAt) / 1000;
  const n = (x: number) => x.toLocaleString("en-US");
  return (
    `[${seconds.toFixed(0).padStart(5)} s] sent ${n(stats.sent)}  accepted ${n(stats.accepted)}  ` +
    `duplicate batches ${n(stats.duplicates)}  retries ${n(stats.retries)}  errors ${n(stats.errors)}  ` +
    `(${n(Math.round(stats.sent / Math.max(seconds, 0.001)))} records/s)`
  );
}

async function main(): Promise<number> {
  let options: Options | "help";
  try {
    options = parseOptions(process.argv.slice(2));
  } catch (error) {
    if (!(error instanceof UsageError)) throw error;
    console.error(`replay: ${error.message}\n(npm run replay -- --help for usage)`);
    return 2;
  }
  if (options === "help") {
    console.log(USAGE);
    return 0;
  }

  // Unique per run, so a second run within the server's idempotency TTL is not taken for a retry of the first.
  const runId = randomBytes(4).toString("hex");
  const totalPeak = options.workers.reduce((sum, w) => sum + w.site.peakFlowsPerMinute, 0);
  const startedAt = Date.now();
  process.on("SIGINT", () => {
    if (stopping) process.exit(130);
    console.log("Stopping after the batches in flight (Ctrl-C again to quit at once)…");
    stopping = true;
  });
  console.log(
    `Replaying the demo scenario to ${options.endpoint.href}: ~${options.rate.toLocaleString("en-US")} records/s for ` +
      `${options.durationMs / 1000} s, batches of ${options.batch}, collectors ${options.workers.map((w) => w.site.collector).join(", ")} (run ${runId})`,
  );
  const status = setInterval(() => console.log(statusLine(startedAt)), STATUS_EVERY_MS);
  try {
    await Promise.all(
      options.workers.map((w) => runWorker(options, w.site, w.key, (options.rate * w.site.peakFlowsPerMinute) / totalPeak, startedAt, runId)),
    );
  } finally {
    clearInterval(status);
  }
  console.log(statusLine(startedAt));
  if (fatal) console.error(`replay: stopped: ${fatal}`);
  else if (lastError) console.error(`replay: last error: ${lastError}`);
  return fatal || stats.errors > 0 ? 1 : 0;
}

process.exitCode = await main();
