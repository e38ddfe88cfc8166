// First run: `npm run demo` in a child process on a fresh database, timed from the spawn to
// the first successful estimate (the demo's own example question), as a new user meets it;
// then a restart on the seeded database with the build in place; and, as the baseline, the
// development server (Vite compiles routes on first request) that the demo served before.
import { spawn } from "node:child_process";
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { createInterface } from "node:readline";
import { fileURLToPath } from "node:url";
import { DEMO_RIVERLINE_KEY } from "../demo-keys";
import { startChildServer } from "./util";

const ROOT = fileURLToPath(new URL("../..", import.meta.url));
const HOUR_MS = 3600_000;

export interface DemoStart {
  /** Spawn of `scripts/demo.ts` to its first estimate answered 200, seconds. */
  usableSeconds: number;
  /** Spawn to "running at" (build, migrate, seed, start, warm-up), seconds. */
  listeningSeconds: number;
  /** The first estimate's own latency, ms. */
  firstEstimateMs: number;
  /** What the demo printed about its build and seed, for the report. */
  buildLine: string | undefined;
  seedLine: string | undefined;
}

export interface DemoBench {
  /** A fresh clone: no build/ (forced with --rebuild), no database. */
  fresh: DemoStart;
  /** `npm run demo` again: build up to date, demo seeded. */
  restart: DemoStart;
  /** Baseline: the development server on the seeded demo database, spawn to first estimate (the seed not counted). */
  development: { usableSeconds: number; firstEstimateMs: number };
}

/** The demo's own example: bytes from 198.51.100.0/25 to port 443 over the day, per collector. */
async function demoQuestion(url: string): Promise<number> {
  const from = new Date(Math.floor((Date.now() - 24 * HOUR_MS) / HOUR_MS) * HOUR_MS).toISOString();
  const to = new Date(Math.ceil((Date.now() + HOUR_MS) / HOUR_MS) * HOUR_MS).toISOString();
  const t0 = performance.now();
  const res = await fetch(`${url}/api/v1/estimate?from=${from}&to=${to}&src=198.51.100.0/25&dport=443&metric=bytes&groupBy=collector`, {
    headers: { authorization: `Bearer ${DEMO_RIVERLINE_KEY}` },
  });
  if (res.status !== 200) throw new Error(`the demo's estimate answered ${res.status}: ${await res.text()}`);
  await res.json();
  return performance.now() - t0;
}

function runDemo(databaseUrl: string, rebuild: boolean): Promise<DemoStart> {
  const t0 = performance.now();
  const child = spawn(process.execPath, ["--import", "tsx", join(ROOT, "scripts/demo.ts"), ...(rebuild ? ["--rebuild"] : [])], {
    cwd: ROOT,
    env: { ...process.env, DATABASE_URL: databaseUrl, PORT: "0", IPFIX_UDP_PORT: "0", NETFLOW_UDP_PORT: "0", IPFIX_TCP_PORT: "0", LOG_LEVEL: "silent" },
    stdio: ["ignore", "pipe", "inherit"],
  });
  let buildLine: string | undefined;
  let seedLine: string | undefined;
  return new Promise((resolve, reject) => {
    child.once("exit", (code) => reject(new Error(`npm run demo exited with ${code}`)));
    createInterface({ input: child.stdout! }).on("line", (line) => {
      if (/^Built the app|^Production build is up to date/.test(line)) buildLine = line;
      if (/^Seeded |already exist/.test(line)) seedLine = line.replace(/ Events worth slicing:$/, "");
      const running = /running at (http:\/\/\S+)/.exec(line);
      if (!running) return;
      const listeningSeconds = (performance.now() - t0) / 1000;
      demoQuestion(running[1]).then(
        (firstEstimateMs) => {
          const usableSeconds = (performance.now() - t0) / 1000;
          child.removeAllListeners("exit");
          child.once("exit", () => resolve({ usableSeconds, listeningSeconds, firstEstimateMs, buildLine, seedLine }));
          child.kill("SIGTERM");
        },
        (error: unknown) => {
          child.kill("SIGTERM");
          reject(error);
        },
      );
    });
  });
}

export async function benchDemo(): Promise<DemoBench> {
  const dir = mkdtempSync(join(tmpdir(), "weir-bench-demo-"));
  try {
    const url = `file:${join(dir, "weir.db")}`;
    const fresh = await runDemo(url, true);
    const restart = await runDemo(url, false);
    const t0 = performance.now();
    const server = await startChildServer(url, { warm: false });
    try {
      const firstEstimateMs = await demoQuestion(server.url);
      return { fresh, restart, development: { usableSeconds: (performance.now() - t0) / 1000, firstEstimateMs } };
    } finally {
      await server.stop();
    }
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
}
