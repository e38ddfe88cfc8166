import { execFile } from "node:child_process";
import { readFileSync, writeFileSync } from "node:fs";
import { join } from "node:path";
import { fileURLToPath } from "node:url";
import { promisify } from "node:util";
import { afterAll, beforeAll, describe, expect, it, vi } from "vitest";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import { flowRecordToJson } from "~/flow/record";
import { tau } from "~/components/merge/format";
import { windowStartOf } from "~/ingest/window";
import type { MergeAnswer } from "~/merges/answer";
import { parseSampleFile } from "~/samples/document";
import { benchRecords } from "../../scripts/bench/data";
import { launchBrowser, signInWithBrowser, type TestBrowser } from "../helpers/browser";
import { keyFor, postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";

// The Merge page in a real browser (Debian's chromium driven by playwright-core): an
// engineer previews and stores a merge of two collectors, then uploads a sample file and
// watches its progress. The numbers shown are checked against the API's own answers,
// whose correctness the merge and import suites check against the merge rule of
// Duffield, Lund, Thorup (J. ACM 54(6), 2007).

const WINDOW_MS = 300_000;

describe("the Merge page in a browser", () => {
  let t: TestServer;
  let b: TestBrowser;
  let key = "";
  let from = 0;
  let to = 0;

  beforeAll(async () => {
    t = await startTestServer();
    const riverline = await tenantWithKey(t.server, "riverline", { collector: "pop-a", sampleSize: 32 });
    key = riverline.key;
    const other = await keyFor(t.server, riverline.tenant.id, "pop-b");
    await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, "eli@example.com")).id, riverline.tenant.id, "engineer");
    // Invented traffic on documentation space over the last hour, two disjoint streams.
    to = windowStartOf(Date.now(), 300) - WINDOW_MS;
    from = to - 6 * WINDOW_MS;
    for (const [k, seed] of [[riverline.key, 61], [other.key, 62]] as const) {
      const response = await postFlows(t.url, k, JSON.stringify([...benchRecords(600, from, to, seed)].map(flowRecordToJson)));
      expect(response.status).toBe(200);
    }
    b = await launchBrowser();
  }, 120_000);
  afterAll(async () => {
    await b?.close();
    await t?.close();
  });

  it("previews a merge with τ and kept counts per window, then stores it and lists its provenance", async () => {
    const { context, page, errors } = await signInWithBrowser(b.browser, t.url, "eli-engineer");
    await page.goto("/t/riverline/merge");
    // The merge form's boxes (the export panel lists the same collectors).
    const form = page.locator("form").filter({ has: page.getByRole("button", { name: "Preview" }) });
    await form.getByRole("checkbox", { name: "pop-a" }).check();
    await form.getByRole("checkbox", { name: "pop-b" }).check();
    const local = (ms: number) => new Date(ms).toISOString().slice(0, 16);
    await page.getByLabel("From (UTC)").fill(local(from));
    await page.getByLabel("To (UTC)").fill(local(to));
    await page.getByLabel("Name").fill("both-pops");
    await page.getByRole("button", { name: "Preview" }).click();
    await page.getByText("Preview of both-pops").waitFor({ timeout: 30_000 });

    // The same question through the API: the page must show the very windows, τ and kept counts.
    const api = await fetch(`${t.url}/api/v1/merge`, {
      method: "POST",
      headers: { authorization: `Bearer ${key}`, "content-type": "application/json" },
      body: JSON.stringify({ name: "both-pops", collectors: ["pop-a", "pop-b"], from, to, preview: true }),
    });
    const answer = (await api.json()) as MergeAnswer;
    expect(answer.totals.windows).toBe(6);
    expect(answer.windows).toHaveLength(6);
    const rows = page.locator("table").first().locator("tbody tr");
    expect(await rows.count()).toBe(answer.totals.windows);
    // Each row, cell by cell, is the API's window: counts with en-US digit grouping (Intl, here),
    // τ exactly in the cell's tooltip and, in the cell, as the page's τ format writes it.
    const grouped = new Intl.NumberFormat("en-US");
    for (const [i, w] of answer.windows.entries()) {
      // 600 records a collector over 6 windows against k = 32: every merged window sampled, τ > 0.
      expect(w.tau).toBeGreaterThan(0);
      const cells = rows.nth(i).locator("td");
      expect((await cells.allInnerTexts()).map((c) => c.trim())).toEqual([
        `${new Date(w.windowStart).toISOString().slice(0, 16).replace("T", " ")} · 5 min`,
        String(w.inputs),
        grouped.format(w.records),
        grouped.format(w.k),
        tau(w.tau),
        grouped.format(w.kept),
      ]);
      expect(await cells.nth(4).getAttribute("title")).toBe(String(w.tau));
    }

    await page.getByRole("button", { name: "Create merge" }).click();
    await page.getByText("Created both-pops").waitFor({ timeout: 30_000 });
    // The list of merges comes from the page's loader, which reloads after the action.
    await vi.waitFor(async () => expect(await page.locator("main").innerText()).toMatch(/eli-engineer/), { timeout: 30_000, interval: 100 });
    expect(await page.locator("main").innerText()).toMatch(/pop-a,\s*pop-b/);
    expect(errors, errors.join("\n")).toEqual([]);
    await context.close();
  });

  it("exports a sample file for a range and collectors: the download equals the API's export", async () => {
    const { context, page, errors } = await signInWithBrowser(b.browser, t.url, "eli-engineer");
    await page.goto("/t/riverline/merge");
    const panel = page.locator("section").filter({ has: page.getByRole("heading", { name: "Export a sample file" }) });
    await panel.getByRole("checkbox", { name: "pop-a" }).check();
    // 24-hour UTC text, the console's one time form.
    const minute = (ms: number) => new Date(ms).toISOString().slice(0, 16).replace("T", " ");
    await panel.getByLabel("Export from (UTC, 24 h)").fill(minute(from));
    await panel.getByLabel("Export to (UTC, 24 h)").fill(minute(to));
    const download = page.waitForEvent("download");
    await panel.getByRole("button", { name: "Download sample file" }).click();
    const saved = await download;
    expect(saved.suggestedFilename()).toMatch(/^weir-samples-riverline-\d{8}T\d{4}Z-\d{8}T\d{4}Z\.json$/);
    const file = JSON.parse(readFileSync(await saved.path(), "utf8")) as Record<string, unknown>;
    // The sample-file parser reads it, and it is the API's export of the same range (docs/sample-file.md), all but its export time.
    expect(parseSampleFile(file).windows.map((w) => w.collector)).toEqual(Array(6).fill("pop-a"));
    const api = await fetch(`${t.url}/api/v1/samples?from=${from}&to=${to}&collectors=pop-a`, { headers: { authorization: `Bearer ${key}` } });
    const { exportedAt: _a, ...fromApi } = (await api.json()) as Record<string, unknown>;
    const { exportedAt: _b, ...fromPage } = file;
    expect(fromPage).toEqual(fromApi);
    await panel.getByText(/^Saved weir-samples-riverline-/).waitFor();
    expect(errors, errors.join("\n")).toEqual([]);
    await context.close();
  });

  it("uploads a sample file with a progress bar and reports what it imported", async () => {
    const exported = await fetch(`${t.url}/api/v1/samples?from=${from}&to=${to}&collectors=pop-a`, { headers: { authorization: `Bearer ${key}` } });
    expect(exported.status).toBe(200);
    const path = join(t.dir, "pop-a.json");
    writeFileSync(path, await exported.text());

    const { context, page, errors } = await signInWithBrowser(b.browser, t.url, "eli-engineer");
    await page.goto("/t/riverline/merge");
    await page.getByLabel("Collector", { exact: true }).fill("pop-a-archive");
    await page.getByLabel("File", { exact: true }).setInputFiles(path);
    // Every value the progress bar shows while the file is sent, recorded as it changes.
    await page.evaluate(() => {
      const seen: string[] = [];
      (window as unknown as { progressSeen: string[] }).progressSeen = seen;
      new MutationObserver(() => {
        const bar = document.querySelector('[role="progressbar"]');
        const value = bar?.getAttribute("aria-valuenow");
        if (value != null && seen.at(-1) !== value) seen.push(value);
      }).observe(document.body, { subtree: true, childList: true, attributes: true });
    });
    await page.getByRole("button", { name: "Upload" }).click();
    await page.getByText("Imported into collector “pop-a-archive”.").waitFor({ timeout: 30_000 });
    // The bar appeared while sending and ends full once the file is sent and imported.
    const progress = await page.evaluate(() => (window as unknown as { progressSeen: string[] }).progressSeen);
    expect(progress.length).toBeGreaterThan(0);
    expect(progress.at(-1)).toBe("100");
    expect(await page.getByRole("progressbar", { name: "Upload progress" }).getAttribute("aria-valuenow")).toBe("100");
    expect(await page.getByText(/sent and imported/).count()).toBe(1);
    // What the result lists equals the file sent: its windows, kept records and exact records (parsed here by the sample-file parser).
    const sent = parseSampleFile(JSON.parse(readFileSync(path, "utf8")) as unknown).windows;
    expect(sent).toHaveLength(6);
    const figure = (label: string) => page.locator(`xpath=//dt[normalize-space()="${label}"]/following-sibling::dd[1]`).innerText();
    expect(await figure("windows stored")).toBe(String(sent.length));
    expect(await figure("kept records")).toBe(String(sent.reduce((n, w) => n + w.kept.length, 0)));
    expect(await figure("records seen (exact)")).toBe(String(sent.reduce((n, w) => n + w.exact.records, 0n)));
    // The page reloads its data: the new collector can be merged at once, labelled as a copy.
    const mergeForm = page.locator("form").filter({ has: page.getByRole("button", { name: "Preview" }) });
    await mergeForm.getByRole("checkbox", { name: "pop-a-archive" }).waitFor({ timeout: 10_000 });
    expect(await mergeForm.getByText("copy of pop-a", { exact: true }).count(), await mergeForm.innerText()).toBe(1);
    expect(errors, errors.join("\n")).toEqual([]);
    // The same file again: refused (409), shown as an error naming the earlier upload, never as a success.
    await page.getByLabel("Collector", { exact: true }).fill("pop-a-archive");
    await page.getByLabel("File", { exact: true }).setInputFiles(path);
    await page.getByRole("button", { name: "Upload" }).click();
    const alert = page.getByRole("alert").filter({ hasText: "this file was imported already" });
    await alert.waitFor({ timeout: 30_000 });
    expect(await alert.innerText()).toMatch(/imported already: into pop-a-archive at .+Z by eli-engineer/);
    expect(await page.getByText(/Imported into collector/).count()).toBe(0);
    // The refused request itself is the only error the page may log (its 409, and the browser's note of it).
    expect(errors.filter((e) => !/\b409\b/.test(e)), errors.join("\n")).toEqual([]);
    await context.close();
  });

  it("uploads an IPFIX file (RFC 5655) into a collector and shows what the file held", async () => {
    // Written by the demo's exporter script; the records are the demo scenario's invented flows.
    const path = join(t.dir, "probe.ipfix");
    await promisify(execFile)(process.execPath, ["--import", "tsx", fileURLToPath(new URL("../../scripts/export-ipfix.ts", import.meta.url)), "--file", path, "--records", "400"]);
    const { context, page, errors } = await signInWithBrowser(b.browser, t.url, "eli-engineer");
    await page.goto("/t/riverline/merge");
    await page.getByLabel("Collector", { exact: true }).fill("probe-file");
    await page.getByLabel("File", { exact: true }).setInputFiles(path);
    await page.getByRole("button", { name: "Upload" }).click();
    await page.getByText("IPFIX file sampled into collector “probe-file”.").waitFor({ timeout: 30_000 });
    // The 400 records asked of the exporter script, all stored.
    expect(await page.locator(`xpath=//dt[normalize-space()="flow records stored"]/following-sibling::dd[1]`).innerText()).toBe("400");
    expect(await page.getByText("messages", { exact: true }).locator("..").innerText()).toMatch(/16/);
    const { rows } = await t.server.db.$client.execute("SELECT sum(r.records) AS n FROM reservoirs r JOIN collectors c ON c.id = r.collector_id WHERE c.name = 'probe-file'");
    expect(Number(rows[0].n)).toBe(400);
    expect(errors, errors.join("\n")).toEqual([]);
    await context.close();
  });
});
