// The production build that tests/server/production.test.ts and demo-mode.test.ts start: made
// once per test run and shared. Two files building into the same build/ at once (vitest runs
// files in parallel) would let one start a server on the other's half-written bundle.
import { execFile } from "node:child_process";
import { existsSync, mkdirSync, readFileSync, rmSync, writeFileSync } from "node:fs";
import { join } from "node:path";
import { promisify } from "node:util";
import { inject } from "vitest";

const ROOT = join(import.meta.dirname, "..", "..");
const LOCK = join(ROOT, "build.test-lock");
const STAMP = join(ROOT, "build", ".test-run");

async function withLock<T>(work: () => Promise<T>): Promise<T> {
  for (let waited = 0; ; waited += 200) {
    try {
      mkdirSync(LOCK); // atomic: one holder at a time
      break;
    } catch {
      if (waited > 300_000) throw new Error(`waited 300 s for ${LOCK}; remove it if no build is running`);
      await new Promise((resolve) => setTimeout(resolve, 200));
    }
  }
  try {
    return await work();
  } finally {
    rmSync(LOCK, { recursive: true, force: true });
  }
}

/** Builds the app into build/ unless this test run already did; returns the project root. */
export async function productionBuild(): Promise<string> {
  const run = inject("testRunId");
  await withLock(async () => {
    if (existsSync(STAMP) && readFileSync(STAMP, "utf8") === run) return;
    await promisify(execFile)(process.execPath, [join(ROOT, "node_modules/@react-router/dev/bin.js"), "build"], { cwd: ROOT, timeout: 240_000 });
    writeFileSync(STAMP, run);
  });
  return ROOT;
}
