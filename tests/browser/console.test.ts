import { readFileSync } from "node:fs";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import { createTenant } from "~/tenants.server";
import { launchBrowser, signInWithBrowser, type TestBrowser, recentInventedFlows } from "../helpers/browser";
import { startTestServer, type TestServer } from "../helpers/server";

// The console in a real browser (Debian's chromium driven by playwright-core), against a
// real server with the local fake GitHub and fake SMTP: the paths people take.

describe("console in a browser", () => {
  let t: TestServer;
  let b: TestBrowser;
  let secret = "";

  beforeAll(async () => {
    t = await startTestServer();
    const riverline = await createTenant(t.server.db, { slug: "riverline", name: "Riverline", sampleSize: 64 });
    const tributary = await createTenant(t.server.db, { slug: "tributary", name: "Tributary" });
    for (const [email, role] of [["ada@example.com", "admin"], ["vera@example.com", "viewer"]] as const) {
      await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, email)).id, riverline.id, role);
    }
    await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, "oskar@example.org")).id, tributary.id, "admin");
    b = await launchBrowser();
  }, 120_000);
  afterAll(async () => {
    await b?.close();
    await t?.close();
  });

  it("an admin signs in through the fake GitHub and creates a key, shown once", async () => {
    const { context, page, errors } = await signInWithBrowser(b.browser, t.url, "ada-admin");
    await page.goto("/t/riverline/keys");
    await page.getByLabel("Collector", { exact: true }).fill("pop-browser");
    await page.getByRole("radio", { name: /^Both/ }).check();
    await page.getByRole("button", { name: "Create key" }).click();
    const secretBox = page.getByLabel(/Secret of key weir_/);
    await secretBox.waitFor();
    secret = await secretBox.inputValue();
    expect(secret).toMatch(/^weir_[0-9a-f]{8}_[A-Za-z0-9_-]{32}$/);
    await page.reload();
    expect(await page.getByLabel(/Secret of key weir_/).count()).toBe(0);
    expect(errors, errors.join("\n")).toEqual([]);
    await context.close();
  });

  it("flows posted with that key show in Slice with an interval, a chart, and a CSV export", async () => {
    // Heavy-tailed invented flows on documentation addresses (RFC 5737), more than k, so τ > 0.
    const now = Date.now();
    const records = recentInventedFlows(now, 400);
    const res = await fetch(`${t.url}/api/v1/flows`, {
      method: "POST",
      headers: { authorization: `Bearer ${secret}`, "content-type": "application/json" },
      body: JSON.stringify(records),
    });
    expect(res.status).toBe(200);

    const { context, page, errors } = await signInWithBrowser(b.browser, t.url, "vera-viewer");
    await page.goto("/t/riverline/slice?range=6h&src=198.51.100.0%2F24&groupBy=dst");
    await page.getByText("Standard error").first().waitFor({ timeout: 30_000 });
    const body = await page.locator("main").innerText();
    expect(body).toMatch(/95% interval/);
    expect(body).toMatch(/Standard error/);
    await page.locator(".uplot").first().waitFor({ timeout: 30_000 });
    const download = page.waitForEvent("download");
    await page.getByRole("button", { name: "Export CSV" }).click();
    const csv = readFileSync(await (await download).path(), "utf8");
    expect(csv).toMatch(/statistical/i);
    expect(csv).toMatch(/key,estimate,std_error,ci95_low,ci95_high,kept,rough/);
    expect(csv).toMatch(/203\.0\.113\.0\/24/);
    expect(errors).toEqual([]);
    await context.close();
  });

  it("an admin invites a person; the caught e-mail's link lets her join after signing in", async () => {
    const admin = await signInWithBrowser(b.browser, t.url, "ada-admin");
    await admin.page.goto("/t/riverline/people");
    await admin.page.getByLabel("E-mail").fill("nina@example.net");
    await admin.page.getByLabel("Role", { exact: true }).selectOption("engineer");
    await admin.page.getByRole("button", { name: "Send invitation" }).click();
    await admin.page.getByText(/nina@example\.net/).first().waitFor();
    await admin.page.goto("/dev/mail");
    const link = await admin.page.locator('a[href*="/invite/"]').first().getAttribute("href");
    expect(link).toBeTruthy();
    await admin.context.close();

    const nina = await signInWithBrowser(b.browser, t.url, "nina-newcomer");
    await nina.page.goto(link!);
    await nina.page.getByRole("button", { name: "Accept" }).click();
    await nina.page.waitForURL(/\/t\/riverline\/slice/);
    expect(await nina.page.locator("header").first().innerText()).toMatch(/engineer/);
    await nina.context.close();
  });

  it("a viewer sees no way to create keys, and a forged form post is refused", async () => {
    const { context, page } = await signInWithBrowser(b.browser, t.url, "vera-viewer");
    await page.goto("/t/riverline/slice");
    expect(await page.getByRole("link", { name: "Keys" }).count()).toBe(0);
    const keysPage = await page.goto("/t/riverline/keys");
    expect(keysPage?.status()).toBe(403);
    expect(await page.getByRole("button", { name: "Create key" }).count()).toBe(0);
    const forged = await page.request.post("/t/riverline/keys", { form: { intent: "create", collector: "sneaky", scope: "both" } });
    expect(forged.status()).toBe(403);
    await context.close();
  });

  it("a member of another tenant cannot see this one", async () => {
    const { context, page } = await signInWithBrowser(b.browser, t.url, "oskar-outsider");
    const res = await page.goto("/t/riverline/slice");
    expect(res?.status()).toBe(404);
    expect(await page.locator("body").innerText()).not.toMatch(/198\.51\.100/);
    await context.close();
  });
});
