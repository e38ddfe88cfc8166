import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import { launchBrowser, signInWithBrowser, type TestBrowser, recentInventedFlows } from "../helpers/browser";
import { postFlows, tenantWithKey, startTestServer, type TestServer } from "../helpers/server";

// The Slice rate view in a real browser (Debian's chromium driven by playwright-core): the
// Total | Rate switch changes the page URL, the answer comes back as rates (bit/s with SI
// prefixes, common practice for link speeds) with the windows' 95th percentile, and the chart draws.

describe("Slice: Total | Rate in a browser", () => {
  let t: TestServer;
  let b: TestBrowser;
  let key = "";

  beforeAll(async () => {
    t = await startTestServer();
    const riverline = await tenantWithKey(t.server, "riverline", { scope: "both", sampleSize: 64 });
    key = riverline.key;
    await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, "vera@example.com")).id, riverline.tenant.id, "viewer");
    b = await launchBrowser();
  }, 120_000);
  afterAll(async () => {
    await b?.close();
    await t?.close();
  });

  it("switching to Rate puts unit=rate in the URL and shows bit/s, the p95 and the per-window chart", async () => {
    // Invented flows of the last half hour on documentation addresses (RFC 5737), more than k, so τ > 0.
    const now = Date.now();
    const records = recentInventedFlows(now, 400);
    expect((await postFlows(t.url, key, JSON.stringify(records))).status).toBe(200);

    const { context, page, errors } = await signInWithBrowser(b.browser, t.url, "vera-viewer");
    await page.goto("/t/riverline/slice?range=1h&groupBy=dport");
    await page.getByText("Standard error").first().waitFor({ timeout: 30_000 });
    await page.getByRole("button", { name: "Rate", exact: true }).click();
    await page.getByText("95th percentile of").first().waitFor({ timeout: 30_000 });
    expect(new URL(page.url()).searchParams.get("unit")).toBe("rate");
    const body = await page.locator("main").innerText();
    expect(body).toMatch(/Bit\/s of the subset, mean over the range/i);
    expect(body).toMatch(/\d (bit|kbit|Mbit)\/s/);
    expect(body).toMatch(/Share of this question/i);
    expect(body).toMatch(/Share of all traffic/i);
    await page.getByText("Rate per window").first().waitFor({ timeout: 30_000 });
    await page.locator(".uplot").first().waitFor({ timeout: 30_000 });
    // Back to totals: no rates left on the page.
    await page.getByRole("button", { name: "Total", exact: true }).click();
    await page.waitForFunction(() => !new URL(location.href).searchParams.has("unit"));
    await page.getByText("95th percentile of").waitFor({ state: "detached", timeout: 30_000 });
    expect(errors).toEqual([]);
    await context.close();
  });
});
