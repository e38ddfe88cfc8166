// Runs once before the test files. Browser tests drive Debian's chromium through
// playwright-core (Playwright's own browser download cannot work here), so install
// it with apt-get when it is missing — CI machines start without it.
import { execSync } from "node:child_process";
import { existsSync } from "node:fs";

export const CHROMIUM = "/usr/bin/chromium";

export default function setup(): void {
  if (existsSync(CHROMIUM)) return;
  console.log("Installing Debian's chromium for the browser tests (apt-get)…");
  execSync("apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium", { stdio: "inherit" });
  if (!existsSync(CHROMIUM)) throw new Error(`chromium is still missing at ${CHROMIUM} after apt-get install`);
}
