import { spawn, type ChildProcess } from "node:child_process";
import { statSync } from "node:fs";
import { fileURLToPath } from "node:url";
import { createInterface } from "node:readline";

/** Starts scripts/bench/child.ts on the given database; resolves with its URL once it listens. */
export function startChildServer(databaseUrl: string): Promise<{ child: ChildProcess; url: string; stop: () => Promise<void> }> {
  const child = spawn(process.execPath, ["--import", "tsx", fileURLToPath(new URL("./child.ts", import.meta.url))], {
    env: { ...process.env, DATABASE_URL: databaseUrl },
    stdio: ["ignore", "pipe", "inherit"],
  });
  const stop = () =>
    new Promise<void>((resolve) => {
      if (child.exitCode !== null) return resolve();
      child.once("exit", () => resolve());
      child.kill("SIGTERM");
    });
  return new Promise((resolve, reject) => {
    child.once("exit", (code) => reject(new Error(`benchmark server exited with ${code}`)));
    createInterface({ input: child.stdout! }).on("line", (line) => {
      const ready = /^WEIR_BENCH_READY (\S+)$/.exec(line);
      if (ready) {
        child.removeAllListeners("exit");
        resolve({ child, url: ready[1], stop });
      }
    });
  });
}

/** Bytes a SQLite database occupies on disk (main file plus WAL, if any). */
export function databaseBytes(path: string): number {
  let total = 0;
  for (const file of [path, `${path}-wal`]) {
    try {
      total += statSync(file).size;
    } catch {
      // no WAL file
    }
  }
  return total;
}

export function percentile(sorted: number[], p: number): number {
  const i = Math.min(sorted.length - 1, Math.max(0, Math.ceil(p * sorted.length) - 1));
  return sorted[i];
}

export const fmt = (n: number, digits = 1) => n.toLocaleString("en-US", { maximumFractionDigits: digits });
