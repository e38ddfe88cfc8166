import type { Browser, Locator, Page } from "playwright-core";
import { afterAll, beforeAll, describe, expect, it, vi } from "vitest";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import { launchBrowser, type TestBrowser, recentInventedFlows } from "../helpers/browser";
import { keyFor, postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";

// The console at a phone's width in a real browser (Debian's chromium driven by playwright-core):
// 390 CSS px is the viewport width of a common current phone (common practice for mobile checks).
// Checked as a person would find it: the page never scrolls sideways, the sections are reached
// through a menu, wide tables scroll inside their box with their first column in view, and
// text typed into a Slice box is never silently left out of the question.

const PHONE = { width: 390, height: 844 };

async function phoneSignIn(browser: Browser, baseUrl: string, login: string): Promise<{ page: Page; errors: string[]; close(): Promise<void> }> {
  // Not isMobile: Chromium's mobile emulation widens the layout viewport to fit the page, which would hide the overflow checked here.
  const context = await browser.newContext({ baseURL: baseUrl, viewport: PHONE, hasTouch: true });
  const page = await context.newPage();
  const errors: string[] = [];
  page.on("pageerror", (e) => errors.push(String(e)));
  page.on("console", (m) => {
    if (m.type() === "error") errors.push(m.text());
  });
  await page.goto("/signin");
  await page.getByRole("button", { name: "Sign in with GitHub" }).click();
  await page.locator(`a[data-login="${login}"]`).click();
  await page.waitForURL((url) => !url.pathname.startsWith("/signin") && !url.pathname.startsWith("/auth/"));
  return { page, errors, close: () => context.close() };
}

/** The page's own horizontal overflow: the document must not be wider than the viewport (CSSOM View, scrollWidth). */
async function pageOverflow(page: Page): Promise<{ scrollWidth: number; innerWidth: number }> {
  return page.evaluate(() => ({ scrollWidth: document.scrollingElement!.scrollWidth, innerWidth: window.innerWidth }));
}

/**
 * Scrolls a table's box to its right end and returns where its first header cell and a cell of
 * the second column are, relative to the box; the first must stay at the box's left edge.
 */
async function scrollTableRight(table: Locator) {
  return table.evaluate((el) => {
    const box = el.parentElement!;
    const before = el.querySelector("tbody tr td:nth-child(2)")!.getBoundingClientRect().left;
    box.scrollLeft = box.scrollWidth;
    const boxLeft = box.getBoundingClientRect().left;
    const first = el.querySelector("tbody tr > :first-child")!.getBoundingClientRect();
    const second = el.querySelector("tbody tr td:nth-child(2)")!.getBoundingClientRect();
    return { scrolled: box.scrollLeft, overflow: box.scrollWidth - box.clientWidth, firstLeft: first.left - boxLeft, firstRight: first.right, secondMoved: before - second.left, innerWidth: window.innerWidth };
  });
}

describe("the console at 390 px", () => {
  let t: TestServer;
  let b: TestBrowser;

  beforeAll(async () => {
    t = await startTestServer();
    const riverline = await tenantWithKey(t.server, "riverline", { collector: "pop-north-edge-router", sampleSize: 64 });
    const other = await keyFor(t.server, riverline.tenant.id, "pop-south-edge-router");
    await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, "vera@example.com")).id, riverline.tenant.id, "viewer");
    await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, "ada@example.com")).id, riverline.tenant.id, "admin");
    // Heavy-tailed invented flows on documentation addresses (RFC 5737) over the last half hour.
    const now = Date.now();
    for (const [key, offset] of [[riverline.key, 0], [other.key, 1]] as const) {
      const records = recentInventedFlows(now, 300, offset);
      expect((await postFlows(t.url, key, JSON.stringify(records))).status).toBe(200);
    }
    b = await launchBrowser();
  }, 120_000);
  afterAll(async () => {
    await b?.close();
    await t?.close();
  });

  it("Slice: no sideways page scroll, a menu for the sections, and the group table keeps its first column in view", async () => {
    const { page, errors, close } = await phoneSignIn(b.browser, t.url, "vera-viewer");
    await page.goto("/t/riverline/slice?range=6h&groupBy=dst");
    const table = page.locator("table").filter({ has: page.locator("caption", { hasText: "Estimates per destination prefix" }) });
    await table.waitFor({ timeout: 60_000 });
    const size = await pageOverflow(page);
    expect(size.scrollWidth, `document ${size.scrollWidth} px wide in a ${size.innerWidth} px viewport`).toBeLessThanOrEqual(size.innerWidth);

    // The group table is wider than the phone: it scrolls inside its box, its first column (the group) stays.
    const scroll = await scrollTableRight(table);
    expect(scroll.overflow).toBeGreaterThan(0);
    expect(scroll.scrolled).toBeGreaterThan(0);
    expect(scroll.secondMoved).toBeGreaterThan(0);
    expect(Math.abs(scroll.firstLeft)).toBeLessThanOrEqual(1);
    expect(scroll.firstRight).toBeLessThanOrEqual(scroll.innerWidth);

    // The sections: one menu button in the header; its links work and it closes after one is used.
    const menu = page.locator("header details > summary");
    expect(await menu.innerText()).toMatch(/^Menu/);
    const intakeLink = page.getByRole("navigation", { name: "Console sections" }).getByRole("link", { name: "Intake" });
    expect(await intakeLink.isVisible()).toBe(false);
    await menu.click();
    await intakeLink.click();
    await page.waitForURL(/\/t\/riverline\/intake/);
    await vi.waitFor(async () => expect(await intakeLink.isVisible()).toBe(false), { timeout: 10_000, interval: 100 });
    expect(errors, errors.join("\n")).toEqual([]);
    await close();
  });

  it("Intake: no sideways page scroll, and the collector column stays in view when the table scrolls", async () => {
    const { page, errors, close } = await phoneSignIn(b.browser, t.url, "vera-viewer");
    await page.goto("/t/riverline/intake");
    const table = page.locator("main table").first();
    await page.getByText("pop-north-edge-router").first().waitFor({ timeout: 60_000 });
    const size = await pageOverflow(page);
    expect(size.scrollWidth, `document ${size.scrollWidth} px wide in a ${size.innerWidth} px viewport`).toBeLessThanOrEqual(size.innerWidth);
    const scroll = await scrollTableRight(table);
    expect(scroll.scrolled).toBeGreaterThan(0);
    expect(scroll.secondMoved).toBeGreaterThan(0);
    expect(Math.abs(scroll.firstLeft)).toBeLessThanOrEqual(1);
    // The collector's name is still readable at the left.
    const firstCell = table.locator("tbody tr").first().locator(":scope > :first-child");
    expect(await firstCell.innerText()).toMatch(/pop-(north|south)-edge-router/);
    expect(errors, errors.join("\n")).toEqual([]);
    await close();
  });

  it("Ledger and Keys: the wide tables scroll in their box, the page does not", async () => {
    const { page, errors, close } = await phoneSignIn(b.browser, t.url, "ada-admin");
    for (const path of ["/t/riverline/ledger", "/t/riverline/keys"]) {
      await page.goto(path);
      await page.locator("main table").first().waitFor({ timeout: 60_000 });
      const size = await pageOverflow(page);
      expect(size.scrollWidth, `${path}: document ${size.scrollWidth} px wide in a ${size.innerWidth} px viewport`).toBeLessThanOrEqual(size.innerWidth);
    }
    expect(errors, errors.join("\n")).toEqual([]);
    await close();
  });

  it("Slice: text left in a box applies when focus moves to a range; refused text holds the question", async () => {
    const { page, errors, close } = await phoneSignIn(b.browser, t.url, "vera-viewer");
    await page.goto("/t/riverline/slice?range=6h");
    const source = page.getByLabel("Source in", { exact: true });
    await source.waitFor({ timeout: 60_000 });
    // A placeholder says what to type; it does not look like a value.
    expect(await source.getAttribute("placeholder")).toMatch(/^add a CIDR, e\.g\. /);

    // Typed, not Enter: the click on a range takes focus away, which applies the text first.
    await source.fill("198.51.100.0/25");
    await page.getByText("1h", { exact: true }).click();
    await page.waitForURL((url) => url.searchParams.get("range") === "1h");
    await vi.waitFor(() => expect(new URL(page.url()).searchParams.get("src")).toBe("198.51.100.0/25"), { timeout: 10_000, interval: 100 });
    expect(await source.inputValue()).toBe("");

    // Host bits set: refused. The reason shows, and the answer is replaced by a notice until it is fixed.
    await source.fill("198.51.100.7/24");
    await page.getByText("6h", { exact: true }).click();
    await page.getByText("Not asked yet").waitFor({ timeout: 10_000 });
    expect(await page.locator("section[aria-label=Answer]").innerText()).toMatch(/did you mean 198\.51\.100\.0\/24/);
    expect(new URL(page.url()).searchParams.get("src")).toBe("198.51.100.0/25");
    await source.fill("");
    await source.blur();
    await page.getByText("Not asked yet").waitFor({ state: "detached", timeout: 10_000 });

    // The custom range reads 24-hour UTC text, never the browser's 12-hour locale form.
    await page.getByText("Custom", { exact: true }).click();
    const from = page.getByLabel(/^From/);
    expect(await from.getAttribute("type")).toBe("text");
    expect(await from.inputValue()).toMatch(/^\d{4}-\d{2}-\d{2} \d{2}:\d{2}$/);
    await from.fill("2024-05-01 14:05");
    await page.getByLabel(/^To/).fill("2024-05-01 15:30");
    await page.getByLabel(/^To/).press("Enter");
    await vi.waitFor(() => expect(new URL(page.url()).searchParams.get("from")).toBe("2024-05-01T14:05:00Z"), { timeout: 10_000, interval: 100 });
    expect(new URL(page.url()).searchParams.get("to")).toBe("2024-05-01T15:30:00Z");
    expect(errors, errors.join("\n")).toEqual([]);
    await close();
  });
});
