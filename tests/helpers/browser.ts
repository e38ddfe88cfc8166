// A headless Chromium (Debian's package) driven by playwright-core, signed in through
// the console's own sign-in page and the local fake GitHub.
import { chromium, type Browser, type BrowserContext, type Page } from "playwright-core";

export interface TestBrowser {
  browser: Browser;
  close(): Promise<void>;
}

export async function launchBrowser(): Promise<TestBrowser> {
  const browser = await chromium.launch({
    executablePath: "/usr/bin/chromium",
    args: [
      "--no-sandbox",
      "--disable-gpu",
      "--disable-dev-shm-usage",
      "--disable-background-networking",
      "--disable-component-update",
      "--disable-sync",
      "--no-first-run",
    ],
  });
  return {
    browser,
    // playwright-core gives each launch a fresh temporary profile and removes it on close.
    close: () => browser.close(),
  };
}

/** A fresh browser context signed in as one of the fake GitHub's accounts, through the UI. */
export async function signInWithBrowser(browser: Browser, baseUrl: string, login: string): Promise<{ context: BrowserContext; page: Page; errors: string[] }> {
  const context = await browser.newContext({ baseURL: baseUrl, viewport: { width: 1366, height: 900 }, acceptDownloads: true });
  const page = await context.newPage();
  const errors: string[] = [];
  page.on("pageerror", (e) => errors.push(String(e)));
  page.on("console", (m) => {
    if (m.type() === "error") errors.push(`${m.text()} ${m.location().url ?? ""}`.trim());
  });
  page.on("response", (r) => {
    if (r.status() >= 400 && r.request().resourceType() !== "document") errors.push(`${r.status()} ${r.url()}`);
  });
  await page.goto("/signin");
  await page.getByRole("button", { name: "Sign in with GitHub" }).click();
  await page.locator(`a[data-login="${login}"]`).click();
  await page.waitForURL((url) => !url.pathname.startsWith("/signin") && !url.pathname.startsWith("/auth/"));
  return { context, page, errors };
}

/**
 * Heavy-tailed invented flows on documentation addresses (RFC 5737) over the last half hour
 * before `now`, as JSON records for POST /api/v1/flows; `offset` shifts the sources so two
 * collectors do not send the same flows.
 */
export function recentInventedFlows(now: number, count: number, offset = 0) {
  return Array.from({ length: count }, (_, i) => ({
    src: `198.51.100.${(i + offset) % 200}`,
    dst: `203.0.113.${i % 50}`,
    dport: i % 3 === 0 ? 53 : 443,
    proto: i % 3 === 0 ? 17 : 6,
    bytes: Math.round(60 / Math.pow(((i * 7919) % 997) / 997 + 0.001, 0.8)),
    packets: 1 + (i % 7),
    start: now - (i % 30) * 60_000,
  }));
}
