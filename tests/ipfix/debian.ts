// Debian's python3-ipfix serves as a reference (its IANA element table, its encoder). The test
// set-up (tests/global-setup.ts) installs it with apt-get when missing, as it does chromium; this
// installs it only when a test file runs without that set-up.
import { execFileSync, execSync } from "node:child_process";
import { existsSync } from "node:fs";

/** Debian's interpreter, which sees Debian's python3-* packages (a pyenv or venv python may not). */
export const DEBIAN_PYTHON = "/usr/bin/python3";

function ipfixDir(): string | null {
  try {
    return execFileSync(DEBIAN_PYTHON, ["-c", "import ipfix, os; print(os.path.dirname(ipfix.__file__))"], { encoding: "utf8" }).trim();
  } catch {
    return null;
  }
}

/** The directory of Debian's python3-ipfix module, installing the package when missing. */
export function pythonIpfixDir(): string {
  let dir = existsSync(DEBIAN_PYTHON) ? ipfixDir() : null;
  if (dir === null) {
    execSync("apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq python3 python3-ipfix", { stdio: "inherit" });
    dir = ipfixDir();
  }
  if (dir === null) throw new Error("python3-ipfix is still missing after apt-get install");
  return dir;
}
