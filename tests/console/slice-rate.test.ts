import { parse } from "csv-parse/sync";
import { createElement } from "react";
import { renderToStaticMarkup } from "react-dom/server";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import { GroupsTable, Headline } from "~/components/slice/Results";
import { buildAnswer, type EstimateAnswer } from "~/query/answer";
import { parseEstimateRequest } from "~/query/request";
import { rateParts } from "~/query/rate-windows";
import { compileQuery } from "~/query/scan";
import { rankGroups } from "~/query/selection";
import { seededUniform } from "~/sampling/uniform";
import { estimatesCsv } from "~/slice/csv";
import { formatPercent, formatRate, formatRateRange } from "~/slice/format";
import { defaultSliceState, estimateSearch, parseSliceParams, sliceParams, type SliceState } from "~/slice/query-state";
import { buildSeries } from "~/slice/series";
import { postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";
import { signIn, type SignedIn } from "../helpers/session";
import { sampleTrial, simPopulation, T0, WINDOW_MS, WINDOWS } from "../query/selection-sim";

// The Slice page's rate view: Total | Rate in the page URL, the headline and the group table in
// bit/s (estimate × 8 / seconds: 8 bits per octet, RFC 791 §3.1), the windows' 95th percentile
// with its interval and notes, both shares labelled, the chart's points as rates and the CSV's
// rate columns (read with csv-parse, a registry CSV parser). Every expected figure is computed
// here from the answer's totals, not copied from the code under test.

const SECONDS = (WINDOWS * WINDOW_MS) / 1000;

/** An answer over the invented population of the selection tests (four 5-minute windows, k = 64, RFC 5737 space). */
function rateAnswer(groupBy: "dport" | "window"): EstimateAnswer {
  const population = simPopulation(8, 150, 20240501);
  const reservoirs = sampleTrial(population, 64, seededUniform(5), 0);
  const parsed = parseEstimateRequest({ from: T0, to: T0 + WINDOWS * WINDOW_MS, groupBy, top: 1000, metric: "bytes", unit: "rate" });
  if (!parsed.ok) throw new Error(parsed.message);
  const { selection, ...result } = rankGroups(reservoirs, compileQuery(parsed.query, "bytes"), "estimate");
  const rows = Array.from({ length: WINDOWS }, (_, w) => {
    const inWindow = population.filter((r) => r.window === w);
    return {
      windowStart: T0 + w * WINDOW_MS,
      windowSeconds: WINDOW_MS / 1000,
      records: inWindow.length,
      bytes: BigInt(inWindow.reduce((s, r) => s + r.bytes, 0)),
      packets: BigInt(inWindow.reduce((s, r) => s + r.packets, 0)),
    };
  });
  const exact = { records: BigInt(population.length), bytes: rows.reduce((s, r) => s + r.bytes, 0n), packets: rows.reduce((s, r) => s + r.packets, 0n) };
  return buildAnswer({
    metric: "bytes",
    result,
    windows: WINDOWS,
    collectors: ["edge-1"],
    spans: rows,
    exact,
    from: T0,
    to: T0 + WINDOWS * WINDOW_MS,
    selection,
    groupByWindow: groupBy === "window",
    rate: rateParts(reservoirs, rows, parsed.query, "bytes", "bytes"),
    context: { unseenTerm: Math.max(...reservoirs.map((r) => r.tau)), cap: Number(exact.bytes) },
  });
}

const rateState: SliceState = { ...defaultSliceState(), unit: "rate", groupBy: "dport", top: 8 };
const html = (element: Parameters<typeof renderToStaticMarkup>[0]) => renderToStaticMarkup(element).replace(/&#x27;/g, "'");

describe("the rate view renders rates", () => {
  const answer = rateAnswer("dport");

  it("formats bit/s with decimal SI prefixes (IEC 80000-13 unit bit; kilo = 1000), packets and flows per second", () => {
    expect(formatRate(950, "bytes")).toBe("950 bit/s");
    expect(formatRate(12_345, "bytes")).toBe("12.3 kbit/s");
    expect(formatRate(12_345_678, "bytes")).toBe("12.3 Mbit/s");
    expect(formatRate(2_500_000_000, "bytes")).toBe("2.50 Gbit/s");
    expect(formatRate(2_500, "packets")).toBe("2.50 k pkt/s");
    expect(formatRate(12, "flows")).toBe("12 flows/s");
    expect(formatRateRange(9_800_000, 10_200_000, "bytes")).toBe("9.80 – 10.2 Mbit/s");
  });

  it("the headline shows the mean rate = total × 8 / seconds with its interval scaled alike, and the p95 with its interval and notes", () => {
    const page = html(createElement(Headline, { answer, tenant: "riverline", state: rateState, updating: false, windowSeconds: 300 }));
    const rate = (answer.estimate * 8) / SECONDS;
    expect(answer.rate!.estimate).toBe(rate);
    expect(page).toContain("Bit/s of the subset, mean over the range");
    expect(page).toContain(formatRate(rate, "bytes"));
    expect(page).toContain(formatRateRange((answer.ci95[0] * 8) / SECONDS, (answer.ci95[1] * 8) / SECONDS, "bytes"));
    // Here the estimate lies above the range's exact total, where the interval is capped: no negative half-width.
    expect(answer.estimate).toBeGreaterThan(answer.ci95[1]);
    expect(page).not.toMatch(/± <span[^>]*>-/);
    // The total stays beside the rate, with the seconds divided by.
    expect(page).toContain("Total over the range");
    // The question's share is of all traffic in range, labelled as the group table labels it.
    expect(page).toContain("Share of all traffic");
    expect(page).toContain(`${SECONDS.toLocaleString("en-US")} s of windows`);
    // The p95 of four windows is the largest window's rate, and the page says so.
    const perWindow = rateAnswer("window").groups.map((g) => (g.estimate * 8) / (WINDOW_MS / 1000)).sort((a, b) => a - b);
    expect(answer.p95!.estimate).toBeCloseTo(perWindow[Math.ceil(0.95 * WINDOWS) - 1], 6);
    expect(page).toContain(`95th percentile of ${WINDOWS} windows`);
    expect(page).toContain(formatRate(answer.p95!.estimate, "bytes"));
    expect(page).toContain(formatRateRange(answer.p95!.ci95[0], answer.p95!.ci95[1], "bytes"));
    expect(page).toContain("with fewer than 20 the 95th percentile by nearest rank is the largest window's rate");
    // Totals when asked for totals: no rate anywhere.
    const totals = html(createElement(Headline, { answer, tenant: "riverline", state: { ...rateState, unit: "total" }, updating: false, windowSeconds: 300 }));
    expect(totals).not.toContain("bit/s");
    expect(totals).not.toContain("95th percentile");
  });

  it("the group table shows mean rates and both shares, labelled", () => {
    const table = html(createElement(GroupsTable, { answer, by: "dport", state: rateState }));
    expect(table).toContain("Mean rate");
    expect(table).toContain("Share of this question");
    expect(table).toContain("Share of all traffic");
    const all = Number(answer.exact.bytes);
    for (const g of answer.groups) {
      expect(table).toContain(formatRate((g.estimate * 8) / SECONDS, "bytes"));
      expect(table).toContain(formatPercent(g.estimate / answer.estimate));
      expect(table).toContain(formatPercent(g.estimate / all));
    }
    // As totals the same table reads bytes, with the same shares.
    const totals = html(createElement(GroupsTable, { answer, by: "dport", state: { ...rateState, unit: "total" } }));
    expect(totals).not.toContain("bit/s");
    expect(totals).toContain("Share of this question");
  });

  it("the chart's points are each window's rate, its band scaled by the same 8 / 300 s", () => {
    const byWindow = rateAnswer("window");
    const series = buildSeries(byWindow, 300, "rate");
    expect(series.points).toHaveLength(WINDOWS);
    for (const p of series.points) {
      const g = byWindow.groups.find((x) => Date.parse(x.key) === p.start)!;
      expect(p.estimate).toBe((g.estimate * 8) / 300);
      expect(p.low).toBe((g.ci95[0] * 8) / 300);
      expect(p.high).toBe((g.ci95[1] * 8) / 300);
    }
    expect(buildSeries(byWindow, 300).points[0].estimate).toBe(byWindow.groups.find((g) => Date.parse(g.key) === T0)!.estimate);
  });

  it("the CSV gains rate columns, read back with csv-parse", () => {
    const records: Record<string, string>[] = parse(estimatesCsv(answer, "riverline", "unit=rate"), { columns: true });
    expect(records[0].key).toBe("total");
    expect(records[0].rate_unit).toBe("bit/s");
    expect(Number(records[0].rate_seconds)).toBe(SECONDS);
    expect(Number(records[0].rate)).toBe((answer.estimate * 8) / SECONDS);
    expect(records[0].note).toContain("95th percentile of 4 windows' rates");
    for (const [i, g] of answer.groups.entries()) {
      expect(Number(records[i + 1].rate)).toBe((g.estimate * 8) / SECONDS);
      expect(Number(records[i + 1].rate_ci95_high)).toBe((g.ci95[1] * 8) / SECONDS);
    }
    const totals: Record<string, string>[] = parse(estimatesCsv({ ...answer, unit: undefined }, "riverline", ""), { columns: true });
    expect(Object.keys(totals[0])).not.toContain("rate");
  });

  it("unit=rate lives in the page URL and goes to the estimate API with both calls", () => {
    const state = parseSliceParams(new URLSearchParams("unit=rate&groupBy=dport")).state;
    expect(state.unit).toBe("rate");
    expect(sliceParams(state).get("unit")).toBe("rate");
    expect(estimateSearch(state, "riverline", T0).get("unit")).toBe("rate");
    expect(estimateSearch(state, "riverline", T0, { groupBy: "window", top: 1000 }).get("unit")).toBe("rate");
    expect(sliceParams(defaultSliceState()).has("unit")).toBe(false);
    expect(parseSliceParams(new URLSearchParams("unit=bps")).problems).toEqual(["unit=bps is not one of total, rate; showing totals."]);
  });
});

describe("the Slice page with unit=rate", () => {
  let t: TestServer;
  let viewer: SignedIn;
  beforeAll(async () => {
    t = await startTestServer();
    const riverline = await tenantWithKey(t.server, "riverline", { scope: "both" });
    await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, "vera@example.com")).id, riverline.tenant.id, "viewer");
    // One invented record (RFC 5737 addresses) an hour ago, so the page shows the form and the answer area.
    const flows = [{ src: "198.51.100.7", dst: "203.0.113.9", sport: 40000, dport: 443, proto: 6, bytes: 1500, packets: 2, start: Date.now() - 3_600_000 }];
    expect((await postFlows(t.url, riverline.key, JSON.stringify(flows))).status).toBe(200);
    viewer = await signIn(t.url, "vera-viewer");
  });
  afterAll(() => t?.close());

  it("renders the Total | Rate switch with Rate pressed, and Total pressed without it", async () => {
    const rate = await (await viewer.fetch("/t/riverline/slice?unit=rate")).text();
    expect(rate).toContain('data-unit="rate"');
    expect(rate).toMatch(/<button[^>]*aria-pressed="true"[^>]*>Rate<\/button>/);
    const plain = await (await viewer.fetch("/t/riverline/slice")).text();
    expect(plain).toMatch(/<button[^>]*aria-pressed="true"[^>]*>Total<\/button>/);
  });
});
