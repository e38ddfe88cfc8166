import { describe, expect, test } from "vitest";
import { axisValue, exactMetric, formatBytes, formatCount, formatMetric, formatMetricRange, formatPercent, formatUtc, formatUtcMinute, intervalText, methodNote, parseUtcMinute } from "~/slice/format";

describe("numbers as the console shows them", () => {
  test("bytes in decimal units, three significant figures (common practice in networking: 1 KB = 1000 B)", () => {
    expect(formatBytes(0)).toBe("0 B");
    expect(formatBytes(512)).toBe("512 B");
    expect(formatBytes(999)).toBe("999 B");
    expect(formatBytes(1000)).toBe("1.00 KB");
    expect(formatBytes(1_234_567)).toBe("1.23 MB");
    expect(formatBytes(45_600_000_000)).toBe("45.6 GB");
    expect(formatBytes(999_600)).toBe("1.00 MB");
    expect(formatBytes(2 * 18_446_744_073_709_551_615)).toBe("36.9 EB"); // 2·(2^64 − 1), RFC 7012 unsigned64 twice
  });

  test("packets and flows with SI prefixes and their noun", () => {
    expect(formatCount(845, "flows")).toBe("845 flows");
    expect(formatCount(12.4, "flows")).toBe("12.4 flows");
    expect(formatCount(1_234_567, "packets")).toBe("1.23 M packets");
    expect(formatMetric(1_500_000, "bytes")).toBe("1.50 MB");
    expect(formatMetric(2500, "flows")).toBe("2.50 k flows");
  });

  test("intervals write a shared unit once; chart axes leave the noun of counts to the axis title", () => {
    expect(formatMetricRange(1_770_000_000, 1_780_000_000, "bytes")).toBe("1.77 – 1.78 GB");
    expect(formatMetricRange(980, 1_200, "bytes")).toBe("980 B – 1.20 KB");
    expect(formatMetricRange(3340, 4140, "packets")).toBe("3.34 – 4.14 k packets");
    expect(formatMetricRange(150, 150, "flows")).toBe("150 – 150 flows");
    expect(axisValue(125_000_000, "bytes")).toBe("125 MB");
    expect(axisValue(2500, "packets")).toBe("2.50 k");
    expect(axisValue(200, "flows")).toBe("200");
  });

  test("exact figures for tooltips, including counters past 2^53 sent as text", () => {
    expect(exactMetric(1234567.89, "bytes")).toBe("1,234,567.9 bytes");
    expect(exactMetric("36893488147419103230", "bytes")).toBe("36,893,488,147,419,103,230 bytes");
  });

  test("percentages and UTC times", () => {
    expect(formatPercent(0.1234)).toBe("12.3%");
    expect(formatPercent(0.012345)).toBe("1.23%");
    expect(formatPercent(1.5)).toBe("150%");
    expect(formatPercent(0.00004)).toBe("<0.01%");
    expect(formatPercent(0)).toBe("0%");
    expect(formatPercent(Number.NaN)).toBe("—");
    expect(formatUtc(Date.UTC(2024, 4, 1, 2, 5))).toBe("2024-05-01 02:05 UTC");
    expect(formatUtc("2024-05-01T02:05:00.000Z")).toBe("2024-05-01 02:05 UTC");
    // The Ledger's precision, same form: 24-hour clock (ISO 8601 §4.2.2 time of day), never "2:05 PM".
    expect(formatUtc(Date.UTC(2024, 4, 1, 14, 5, 9), { seconds: true })).toBe("2024-05-01 14:05:09 UTC");
  });

  test("time inputs read 24-hour UTC text and refuse times that do not exist", () => {
    expect(formatUtcMinute(Date.UTC(2024, 4, 1, 14, 5))).toBe("2024-05-01 14:05");
    expect(parseUtcMinute("2024-05-01 14:05")).toBe(Date.UTC(2024, 4, 1, 14, 5));
    // ISO 8601's "T" separator is accepted as well as the space RFC 3339 §5.6 (NOTE) allows.
    expect(parseUtcMinute("2024-05-01T14:05")).toBe(Date.UTC(2024, 4, 1, 14, 5));
    // Days per month and hours 00–23 (RFC 3339 §5.7; 2024 is a leap year).
    expect(parseUtcMinute("2024-02-29 00:00")).toBe(Date.UTC(2024, 1, 29));
    expect(parseUtcMinute("2023-02-29 00:00")).toBeNull();
    expect(parseUtcMinute("2024-04-31 10:00")).toBeNull();
    expect(parseUtcMinute("2024-05-01 24:00")).toBeNull();
    expect(parseUtcMinute("2024-05-01 2:05 PM")).toBeNull();
    expect(parseUtcMinute("05/01/2024 14:05")).toBeNull();
  });
});

describe("intervals as the console shows them (issue 10: never 0 ± 0 while τ > 0)", () => {
  test("no-match reads 0 – upper bound, the method's own words beside it", () => {
    // 3 688.879 B = 1000·(−ln 0.025), Garwood's upper limit for a count of 0 (Biometrika 28, 1936).
    expect(intervalText({ estimate: 0, ci95: [0, 3688.879], method: "no-match" }, "bytes")).toBe("0 – 3.69 KB");
    expect(intervalText({ estimate: 0, ci95: [0, 3688.879], method: "no-match" }, "bytes")).not.toMatch(/±/);
    expect(methodNote("no-match")).toBe("no sampled record matched");
  });

  test("a symmetric normal interval reads estimate ± half-width; a gamma one low – high, named", () => {
    expect(intervalText({ estimate: 1000, ci95: [902, 1098], method: "normal" }, "bytes")).toBe("1.00 KB ± 98 B");
    expect(intervalText({ estimate: 2000, ci95: [240, 7150], method: "gamma" }, "bytes")).toBe("240 B – 7.15 KB");
    expect(methodNote("gamma")).toBe("gamma interval");
    expect(methodNote("normal")).toBeNull();
    expect(intervalText({ estimate: 42, ci95: [42, 42], method: "exact" }, "flows")).toBe("42 flows");
  });
});
