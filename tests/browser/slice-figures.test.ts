import { readFileSync } from "node:fs";
import { parse } from "csv-parse/sync";
import type { Locator, Page } from "playwright-core";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import type { EstimateAnswer, GroupJson } from "~/query/answer";
import { formatMetric, formatMetricRange } from "~/slice/format";
import { launchBrowser, signInWithBrowser, type TestBrowser } from "../helpers/browser";
import { postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";

// The figures the Slice page shows, in a real browser (Debian's chromium driven by
// playwright-core), read slot by slot: the headline, its ±, the 95% interval and the standard
// error, one group row and the CSV download. Labels alone would not notice two numbers swapped.
//
// In "exact" the sample size k exceeds the records sent per window, so τ = 0, every record is
// kept with p = 1 and every answer is the true sum with standard error 0 (Duffield, Lund,
// Thorup, J. ACM 54(6), 2007, §2: p_i = min(1, w_i/τ)); the true sums are computed here from the
// records sent. An exact interval is [sum, sum], so a page that drew [low, low] would look the
// same there: "sampled" (k below the records per window, τ > 0) has an interval with two ends,
// and its figures are checked against the API's answer to the very question the page asked.

const T0 = Date.UTC(2024, 4, 1, 2, 0); // a past hour: the page asks a fixed from/to, no clock involved
const HOUR_MS = 3_600_000;
const FROM = "2024-05-01T02:00Z";
const TO = "2024-05-01T03:00Z";
const SUBSET = "198.51.100.0/25"; // the sources asked for (RFC 5737 documentation space)
const GROUP = "203.0.113.0/24"; // the group row read (destinations grouped by IPv4 /24, the default)

interface Flow {
  src: string;
  dst: string;
  dport: number;
  proto: number;
  bytes: number;
  packets: number;
  start: number;
}

/**
 * Invented flows on documentation addresses over the hour from T0: sources 198.51.100.0–199
 * (those below .128 are in SUBSET), destinations in 192.0.2.0/24 and 203.0.113.0/24.
 */
function inventedFlows(count: number, seed: number): Flow[] {
  return Array.from({ length: count }, (_, i) => ({
    src: `198.51.100.${(i * 37 + seed) % 200}`,
    dst: i % 3 === 0 ? `192.0.2.${i % 40}` : `203.0.113.${i % 50}`,
    dport: i % 3 === 0 ? 53 : 443,
    proto: i % 3 === 0 ? 17 : 6,
    bytes: Math.round(60 / Math.pow(((i * 7919 + seed) % 997) / 997 + 0.001, 0.8)),
    packets: 1 + (i % 7),
    start: T0 + ((i * 13) % 60) * 60_000,
  }));
}

/** Membership of SUBSET by the last octet (all sources are 198.51.100.x): a /25 is octets 0–127. */
const inSubset = (f: Flow) => Number(f.src.split(".")[3]) < 128;
/** Membership of GROUP: the first three octets are the /24. */
const inGroup = (f: Flow) => f.dst.startsWith("203.0.113.");
const sumBytes = (flows: Flow[]) => flows.reduce((s, f) => s + f.bytes, 0);

/**
 * The exact figure as the tooltips write it, computed here with the platform's Intl (en-US
 * digit grouping, at most one decimal) rather than the project's formatter.
 */
const exactBytes = (n: number) => `${new Intl.NumberFormat("en-US", { maximumFractionDigits: 1 }).format(n)} bytes`;

/** The headline panel's slots: the big number, the ± (absent unless the interval is normal), the interval and SE stats. */
function headlineSlots(page: Page) {
  const panel = page.locator("section").filter({ has: page.getByRole("heading", { name: /Bytes in the subset/ }) });
  const stat = (label: string) => panel.locator(`xpath=.//dt[normalize-space()="${label}"]/following-sibling::dd[1]/span`);
  return {
    // The one figure set in the headline's large type (Results.tsx, Headline).
    figure: panel.locator(".text-4xl"),
    plusMinus: panel.locator("span", { hasText: /^± / }),
    interval: stat("95% interval"),
    stdError: stat("Standard error"),
  };
}

/** A group row's cells by the table's own column headings. */
async function groupRowSlots(page: Page, key: string) {
  const table = page.locator("table").filter({ has: page.getByRole("columnheader", { name: "Std error" }) });
  const headings = (await table.locator("thead th").allInnerTexts()).map((h) => h.trim());
  const row = table.locator("tbody tr").filter({ has: page.getByRole("rowheader", { name: key }) });
  await expect.poll(() => row.count()).toBe(1);
  // The row header is the first cell; data cells follow in heading order.
  const cell = (heading: string) => row.locator("td").nth(headings.indexOf(heading) - 1);
  return { estimate: cell("Estimate").locator("span").first(), interval: cell("95% interval").locator("span").first(), stdError: cell("Std error").locator("span").first() };
}

async function textAndTitle(l: Locator) {
  return { text: (await l.innerText()).trim(), title: await l.getAttribute("title") };
}

/** Opens Slice for the question, and returns the API answer the page received and the CSV it exports. */
async function askOnPage(page: Page, tenant: string) {
  const answered = page.waitForResponse((r) => r.url().includes("/api/v1/estimate") && new URL(r.url()).searchParams.get("groupBy") === "dst");
  await page.goto(`/t/${tenant}/slice?from=${FROM}&to=${TO}&src=${encodeURIComponent(SUBSET)}&groupBy=dst`);
  const response = await answered;
  const pageAnswer = (await response.json()) as EstimateAnswer;
  await page.getByText("Standard error", { exact: true }).first().waitFor({ timeout: 30_000 });
  const download = page.waitForEvent("download");
  await page.getByRole("button", { name: "Export CSV" }).click();
  const csv = parse(readFileSync(await (await download).path(), "utf8"), { columns: true }) as Record<string, string>[];
  return { question: new URL(response.url()).searchParams, pageAnswer, csv };
}

/** The same question through the API with the tenant's key (the key names the tenant). */
async function askApi(url: string, key: string, question: URLSearchParams): Promise<EstimateAnswer> {
  const params = new URLSearchParams(question);
  params.delete("tenant");
  const res = await fetch(`${url}/api/v1/estimate?${params}`, { headers: { authorization: `Bearer ${key}` } });
  expect(res.status).toBe(200);
  return (await res.json()) as EstimateAnswer;
}

const groupOf = (answer: EstimateAnswer, key: string): GroupJson => {
  const g = answer.groups.find((x) => x.key === key);
  if (!g) throw new Error(`no group ${key} in ${answer.groups.map((x) => x.key).join(", ")}`);
  return g;
};

describe("Slice shows each figure in its own place", () => {
  let t: TestServer;
  let b: TestBrowser;
  const exact = { key: "", flows: inventedFlows(150, 3) };
  const sampled = { key: "", flows: inventedFlows(1800, 5) };

  beforeAll(async () => {
    t = await startTestServer();
    // 150 records over 12 five-minute windows: at most 150 in any window, below k = 1024, so τ = 0.
    const a = await tenantWithKey(t.server, "exact", { sampleSize: 1024 });
    // 1800 records over 12 windows, about 150 a window, against k = 32: τ > 0 in every window.
    const s = await tenantWithKey(t.server, "sampled", { sampleSize: 32 });
    exact.key = a.key;
    sampled.key = s.key;
    const vera = await ensureUserByEmail(t.server.db, "vera@example.com");
    for (const tenant of [a.tenant, s.tenant]) await setMembership(t.server.db, vera.id, tenant.id, "viewer");
    for (const { key, flows } of [exact, sampled]) {
      expect(flows.every((f) => f.start >= T0 && f.start < T0 + HOUR_MS)).toBe(true);
      expect((await postFlows(t.url, key, JSON.stringify(flows))).status).toBe(200);
    }
    b = await launchBrowser();
  }, 120_000);
  afterAll(async () => {
    await b?.close();
    await t?.close();
  });

  it("with τ = 0: headline, interval, standard error, a group row and the CSV are the true sums", async () => {
    // The true sums, from the records sent (computed here, independent of the scan).
    const subset = exact.flows.filter(inSubset);
    const truth = sumBytes(subset);
    const groupTruth = sumBytes(subset.filter(inGroup));
    expect(truth).toBeGreaterThan(groupTruth);
    expect(groupTruth).toBeGreaterThan(0);

    const { context, page, errors } = await signInWithBrowser(b.browser, t.url, "vera-viewer");
    const { question, pageAnswer, csv } = await askOnPage(page, "exact");
    const api = await askApi(t.url, exact.key, question);
    // The page was given the API's answer, and that answer is exact: the true sums, SE 0 (DLT 2007, §2 at τ = 0).
    expect(pageAnswer).toEqual(api);
    expect(api.method).toBe("exact");
    expect([api.estimate, api.stdError, api.ci95[0], api.ci95[1]]).toEqual([truth, 0, truth, truth]);
    const group = groupOf(api, GROUP);
    expect([group.estimate, group.stdError, group.ci95[0], group.ci95[1]]).toEqual([groupTruth, 0, groupTruth, groupTruth]);
    expect(Number(api.exact.bytes)).toBe(sumBytes(exact.flows)); // every record sent, whatever the filter

    // On screen: short figures by the project's formatter (its input checked above), exact ones in the tooltips (Intl, here).
    const slots = headlineSlots(page);
    expect(await textAndTitle(slots.figure)).toEqual({ text: formatMetric(truth, "bytes"), title: exactBytes(truth) });
    expect(await textAndTitle(slots.interval)).toEqual({ text: formatMetricRange(truth, truth, "bytes"), title: `95% interval: ${exactBytes(truth)} to ${exactBytes(truth)}` });
    expect(await textAndTitle(slots.stdError)).toEqual({ text: "0 B", title: exactBytes(0) });
    // An exact answer has no half-width to show: the headline reads the number alone.
    expect(await slots.plusMinus.count()).toBe(0);

    const row = await groupRowSlots(page, GROUP);
    expect(await textAndTitle(row.estimate)).toEqual({ text: formatMetric(groupTruth, "bytes"), title: exactBytes(groupTruth) });
    expect(await textAndTitle(row.interval)).toEqual({ text: formatMetricRange(groupTruth, groupTruth, "bytes"), title: `95% interval: ${exactBytes(groupTruth)} to ${exactBytes(groupTruth)}` });
    expect(await textAndTitle(row.stdError)).toEqual({ text: "0 B", title: exactBytes(0) });

    // The CSV (parsed by csv-parse, a registry parser): the whole subset's line and the group's line.
    const figures = (line: Record<string, string> | undefined) => line && [line.estimate, line.std_error, line.ci95_low, line.ci95_high].map(Number);
    expect(figures(csv.find((l) => l.key === "total"))).toEqual([truth, 0, truth, truth]);
    expect(figures(csv.find((l) => l.key === GROUP))).toEqual([groupTruth, 0, groupTruth, groupTruth]);
    expect(errors, errors.join("\n")).toEqual([]);
    await context.close();
  });

  it("with τ > 0: the page's headline, ±, interval, standard error, group row and CSV are the API's figures, each in its slot", async () => {
    const { context, page, errors } = await signInWithBrowser(b.browser, t.url, "vera-viewer");
    const { question, pageAnswer, csv } = await askOnPage(page, "sampled");
    const api = await askApi(t.url, sampled.key, question);
    expect(pageAnswer).toEqual(api);
    expect(Number(api.exact.bytes)).toBe(sumBytes(sampled.flows)); // exact counters: every record sent
    // Preconditions that make each slot tell its neighbours apart: a normal interval (so the ± shows)
    // with two distinct ends, and an estimate, half-width and standard error all different.
    expect(api.method).toBe("normal");
    const halfWidth = api.ci95[1] - api.estimate;
    expect(new Set([api.estimate, api.ci95[0], api.ci95[1], halfWidth, api.stdError].map((n) => formatMetric(n, "bytes"))).size).toBe(5);
    const group = groupOf(api, GROUP);
    expect(new Set([group.estimate, group.ci95[0], group.ci95[1], group.stdError].map((n) => formatMetric(n, "bytes"))).size).toBe(4);

    const slots = headlineSlots(page);
    expect(await textAndTitle(slots.figure)).toEqual({ text: formatMetric(api.estimate, "bytes"), title: exactBytes(api.estimate) });
    expect(await textAndTitle(slots.plusMinus)).toEqual({ text: `± ${formatMetric(halfWidth, "bytes")}`, title: `95% interval half-width: ${exactBytes(halfWidth)}` });
    expect(await textAndTitle(slots.interval)).toEqual({
      text: formatMetricRange(api.ci95[0], api.ci95[1], "bytes"),
      title: `95% interval: ${exactBytes(api.ci95[0])} to ${exactBytes(api.ci95[1])}`,
    });
    expect(await textAndTitle(slots.stdError)).toEqual({ text: formatMetric(api.stdError, "bytes"), title: exactBytes(api.stdError) });

    const row = await groupRowSlots(page, GROUP);
    expect(await textAndTitle(row.estimate)).toEqual({ text: formatMetric(group.estimate, "bytes"), title: exactBytes(group.estimate) });
    expect(await textAndTitle(row.interval)).toEqual({
      text: formatMetricRange(group.ci95[0], group.ci95[1], "bytes"),
      title: `95% interval: ${exactBytes(group.ci95[0])} to ${exactBytes(group.ci95[1])}`,
    });
    expect(await textAndTitle(row.stdError)).toEqual({ text: formatMetric(group.stdError, "bytes"), title: exactBytes(group.stdError) });

    // The CSV carries the API's numbers in full (a JSON number's shortest decimal reads back to the same double).
    const figures = (line: Record<string, string> | undefined) => line && [line.estimate, line.std_error, line.ci95_low, line.ci95_high, line.kept].map(Number);
    expect(figures(csv.find((l) => l.key === "total"))).toEqual([api.estimate, api.stdError, api.ci95[0], api.ci95[1], api.kept]);
    expect(figures(csv.find((l) => l.key === GROUP))).toEqual([group.estimate, group.stdError, group.ci95[0], group.ci95[1], group.kept]);
    expect(errors, errors.join("\n")).toEqual([]);
    await context.close();
  });
});
