import { describe, expect, it } from "vitest";
import { resolutionText } from "~/components/slice/Resolution";
import { resolutionJson } from "~/query/answer";

// The answer's `resolution` (which window lengths answered which span) and the console's line
// about it. Times are UTC, ISO 8601 (RFC 3339) in the API.

const at = (iso: string) => Date.parse(iso);

describe("resolutionJson", () => {
  it("lists each window length once, with distinct starts and the span from the first start to the last end, oldest first", () => {
    const spans = [
      // Two collectors share the 10:00 and 11:00 hourly windows: each start counts once.
      { windowStart: at("2026-04-30T10:00:00Z"), windowSeconds: 3600 },
      { windowStart: at("2026-04-30T10:00:00Z"), windowSeconds: 3600 },
      { windowStart: at("2026-04-30T11:00:00Z"), windowSeconds: 3600 },
      { windowStart: at("2026-04-30T12:00:00Z"), windowSeconds: 300 },
      { windowStart: at("2026-04-30T12:55:00Z"), windowSeconds: 300 },
      { windowStart: at("2026-04-30T12:05:00Z"), windowSeconds: 300 },
    ];
    expect(resolutionJson(spans)).toEqual([
      { windowSeconds: 3600, windows: 2, from: "2026-04-30T10:00:00.000Z", to: "2026-04-30T12:00:00.000Z" },
      { windowSeconds: 300, windows: 3, from: "2026-04-30T12:00:00.000Z", to: "2026-04-30T13:00:00.000Z" },
    ]);
    expect(resolutionJson([])).toEqual([]);
  });

  it("puts the longer window first when two lengths start at the same instant (a late record's fine window in a rolled-up hour)", () => {
    const spans = [
      { windowStart: at("2026-04-30T10:10:00Z"), windowSeconds: 300 },
      { windowStart: at("2026-04-30T10:00:00Z"), windowSeconds: 300 },
      { windowStart: at("2026-04-30T10:00:00Z"), windowSeconds: 3600 },
    ];
    expect(resolutionJson(spans).map((r) => [r.windowSeconds, r.windows])).toEqual([
      [3600, 1],
      [300, 2],
    ]);
  });
});

describe("the console's resolution line", () => {
  const hourly = { windowSeconds: 3600, windows: 24, from: "2026-04-30T10:00:00.000Z", to: "2026-05-01T10:00:00.000Z" };
  const fine = { windowSeconds: 300, windows: 288, from: "2026-05-01T10:00:00.000Z", to: "2026-05-02T10:00:00.000Z" };

  it("names hourly roll-ups and the tenant's own windows with their spans", () => {
    expect(resolutionText([hourly, fine], 300)).toBe("Answered from hourly roll-ups (Apr 30 10:00 – May 1 10:00 UTC) and 5-minute windows (May 1 10:00 – May 2 10:00 UTC).");
    expect(resolutionText([hourly], 300)).toBe("Answered from hourly roll-ups (Apr 30 10:00 – May 1 10:00 UTC).");
  });

  it("says nothing when one length of the tenant's own kind answered", () => {
    expect(resolutionText([fine], 300)).toBeNull();
    expect(resolutionText([hourly], 3600)).toBeNull();
    expect(resolutionText([], 300)).toBeNull();
    expect(resolutionText(undefined, 300)).toBeNull();
  });

  it("writes the year when the spans cross one, and lists three lengths", () => {
    const old = { windowSeconds: 3600, windows: 2, from: "2025-12-31T22:00:00.000Z", to: "2026-01-01T00:00:00.000Z" };
    const minute = { windowSeconds: 60, windows: 5, from: "2026-01-01T00:00:00.000Z", to: "2026-01-01T00:05:00.000Z" };
    const quarter = { windowSeconds: 900, windows: 1, from: "2026-01-01T00:05:00.000Z", to: "2026-01-01T00:20:00.000Z" };
    expect(resolutionText([old, minute, quarter], 900)).toBe(
      "Answered from hourly roll-ups (Dec 31 2025 22:00 – Jan 1 2026 00:00 UTC), 1-minute windows (Jan 1 2026 00:00 – Jan 1 2026 00:05 UTC) and 15-minute windows (Jan 1 2026 00:05 – Jan 1 2026 00:20 UTC).",
    );
  });
});
