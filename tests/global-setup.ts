// Runs once before the test files. Some tests drive Debian programs: browser tests drive
// chromium through playwright-core (Playwright's own browser download cannot work here), and
// the IPFIX / NetFlow tests use softflowd as a real exporter with tshark and ipfixDump as
// reference decoders, and python3-ipfix's element table and encoder as references. CI machines start without them, so install whichever is missing with
// apt-get (one update, one install).
import { execSync } from "node:child_process";
import { existsSync, rmSync } from "node:fs";
import { join } from "node:path";
import type { TestProject } from "vitest/node";

declare module "vitest" {
  export interface ProvidedContext {
    /** Tells one test run from the next: tests/helpers/build.ts builds once per run. */
    testRunId: string;
  }
}

export const CHROMIUM = "/usr/bin/chromium";
export const SOFTFLOWD = "/usr/sbin/softflowd";
export const TSHARK = "/usr/bin/tshark";
export const IPFIXDUMP = "/usr/bin/ipfixDump";
/** Debian's python3-ipfix: its IANA element table and encoder are references (tests/ipfix/debian.ts). */
export const PYTHON_IPFIX = "/usr/lib/python3/dist-packages/ipfix/iana.iespec";

const DEBIAN_PACKAGES: { path: string; name: string }[] = [
  { path: CHROMIUM, name: "chromium" },
  { path: SOFTFLOWD, name: "softflowd" },
  { path: TSHARK, name: "tshark" },
  { path: IPFIXDUMP, name: "libfixbuf-tools" },
  { path: PYTHON_IPFIX, name: "python3-ipfix" },
];

export default function setup(project: TestProject): void {
  project.provide("testRunId", `${process.pid}-${Date.now()}`);
  // A lock left by a run that was killed mid-build (no test runs yet, so nobody holds it).
  rmSync(join(import.meta.dirname, "..", "build.test-lock"), { recursive: true, force: true });
  const missing = DEBIAN_PACKAGES.filter((p) => !existsSync(p.path));
  if (missing.length === 0) return;
  const names = missing.map((p) => p.name).join(" ");
  console.log(`Installing Debian packages the tests use (apt-get): ${names}…`);
  // noninteractive: tshark's package asks a debconf question (may non-root users capture?) and would wait for an answer.
  execSync(`apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq ${names}`, { stdio: "inherit" });
  const still = missing.filter((p) => !existsSync(p.path));
  if (still.length > 0) throw new Error(`still missing after apt-get install: ${still.map((p) => `${p.path} (${p.name})`).join(", ")}`);
}
