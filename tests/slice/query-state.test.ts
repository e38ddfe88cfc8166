import fc from "fast-check";
import { describe, expect, test } from "vitest";
import { formatPrefix, coveringPrefix } from "~/net/prefix";
import { GROUP_BY, METRICS, parseEstimateSearchParams, MAX_TOP } from "~/query/request";
import {
  defaultSliceState,
  describeQuery,
  estimateSearch,
  formatInstant,
  LIST_FIELDS,
  MAX_INSTANT_MS,
  parseSliceParams,
  RANGE_PRESETS,
  resolveRange,
  sliceParams,
  sliceSearch,
  type RangePreset,
  type SliceState,
} from "~/slice/query-state";

// ---- generators -------------------------------------------------------------------------------

const ipv4 = fc.tuple(fc.uint8Array({ minLength: 4, maxLength: 4 }), fc.integer({ min: 0, max: 32 })).map(([v4, n]) =>
  formatPrefix(coveringPrefix(Uint8Array.from([0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 255, 255, ...v4]), n)),
);
const ipv6 = fc
  .tuple(fc.uint8Array({ minLength: 16, maxLength: 16 }), fc.integer({ min: 0, max: 128 }))
  // The documentation block 2001:db8::/32 (RFC 3849) keeps the address out of the IPv4-mapped space.
  .map(([bytes, n]) => formatPrefix(coveringPrefix(Uint8Array.from([0x20, 0x01, 0x0d, 0xb8, ...bytes.slice(4)]), n)));
const prefix = fc.oneof(ipv4, ipv6);
const port = fc.oneof(
  fc.integer({ min: 0, max: 65535 }).map(String),
  fc.tuple(fc.integer({ min: 0, max: 65535 }), fc.integer({ min: 0, max: 65535 })).map(([a, b]) => (a === b ? String(a) : `${Math.min(a, b)}-${Math.max(a, b)}`)), // the chip's normal form
);
const protocol = fc.integer({ min: 0, max: 255 }).map(String);
/** A whole number or range up to 2^32 − 1 in the chip's normal form: AS numbers (RFC 6793), interface indexes (RFC 7012 unsigned32). */
const unsigned32 = fc.oneof(
  fc.constantFrom(64496, 64511, 65536, 65551, 0, 4294967295), // documentation AS numbers (RFC 5398) and the ends
  fc.integer({ min: 0, max: 4294967295 }),
);
const numberRange = fc.oneof(
  unsigned32.map(String),
  fc.tuple(unsigned32, unsigned32).map(([a, b]) => (a === b ? String(a) : `${Math.min(a, b)}-${Math.max(a, b)}`)),
);
const collector = fc.stringMatching(/^[A-Za-z0-9][A-Za-z0-9._:-]{0,20}$/);
const list = (item: fc.Arbitrary<string>) => fc.uniqueArray(item, { maxLength: 4 });

const range = fc.oneof(
  fc.constantFrom(...(Object.keys(RANGE_PRESETS) as RangePreset[])).map((preset) => ({ preset })),
  fc
    .tuple(fc.integer({ min: 0, max: MAX_INSTANT_MS }), fc.integer({ min: 0, max: MAX_INSTANT_MS }))
    .filter(([a, b]) => a !== b)
    .map(([a, b]) => ({ from: Math.min(a, b), to: Math.max(a, b) })),
);

/** Questions a person can build with the form: every item valid. */
const state: fc.Arbitrary<SliceState> = fc.record({
  range,
  lists: fc.record({
    src: list(prefix),
    srcExclude: list(prefix),
    dst: list(prefix),
    dstExclude: list(prefix),
    sport: list(port),
    dport: list(port),
    proto: list(protocol),
    srcAs: list(numberRange),
    dstAs: list(numberRange),
    inIf: list(numberRange),
    outIf: list(numberRange),
    collectors: list(collector),
  }),
  metric: fc.constantFrom(null, ...METRICS),
  groupBy: fc.constantFrom(null, ...GROUP_BY),
  prefixLength: fc.record({ ipv4: fc.integer({ min: 0, max: 32 }), ipv6: fc.integer({ min: 0, max: 128 }) }),
  top: fc.integer({ min: 1, max: MAX_TOP }),
  rank: fc.constantFrom("estimate" as const, "split" as const),
  unit: fc.constantFrom("total" as const, "rate" as const),
});

// ---- properties -------------------------------------------------------------------------------

describe("Slice question ⇄ page URL", () => {
  test("a question survives the trip through a URL unchanged, with nothing set aside (fast-check)", () => {
    fc.assert(
      fc.property(state, (s) => {
        // Through the text of a real URL, so percent-encoding takes part (WHATWG URL, application/x-www-form-urlencoded).
        const url = new URL(`https://weir.example/t/riverline/slice?${sliceParams(s)}`);
        const back = parseSliceParams(url.searchParams);
        expect(back.problems).toEqual([]);
        expect(back.state).toEqual(s);
      }),
      { numRuns: 500 },
    );
  });

  test("the link keeps / : and , readable and still reads back as the same question (RFC 3986 §3.4, fast-check)", () => {
    fc.assert(
      fc.property(state, (s) => {
        const search = sliceSearch(s);
        expect(search).not.toMatch(/%2F|%3A|%2C/i);
        const url = new URL(`https://weir.example/t/riverline/slice${search}`);
        expect(parseSliceParams(url.searchParams).state).toEqual(s);
      }),
      { numRuns: 500 },
    );
    expect(sliceSearch({ ...defaultSliceState(), lists: { ...defaultSliceState().lists, src: ["198.51.100.0/24", "2001:db8::/32"] }, groupBy: "dst" })).toBe(
      "?src=198.51.100.0/24,2001:db8::/32&groupBy=dst",
    );
  });

  test("equal questions give equal links, and a link read back gives the same link (fast-check)", () => {
    fc.assert(
      fc.property(state, (s) => {
        const text = sliceParams(s).toString();
        expect(sliceParams(parseSliceParams(new URLSearchParams(text)).state).toString()).toBe(text);
      }),
    );
  });

  test("the default question is the empty query string (common practice: short links)", () => {
    expect(sliceParams(defaultSliceState()).toString()).toBe("");
    expect(parseSliceParams(new URLSearchParams("")).state).toEqual(defaultSliceState());
  });

  test("reads a hand-written link: lists comma-separated or repeated, protocol names, one prefix length for both families", () => {
    const { state: s, problems } = parseSliceParams(
      new URLSearchParams("range=6h&src=198.51.100.0/24,%202001:db8::/32&src=192.0.2.0/24&proto=tcp,UDP,47&groupBy=dst&prefixLength=16&top=25"),
    );
    expect(problems).toEqual([]);
    expect(s.range).toEqual({ preset: "6h" });
    expect(s.lists.src).toEqual(["198.51.100.0/24", "2001:db8::/32", "192.0.2.0/24"]);
    // IANA protocol numbers: TCP 6, UDP 17.
    expect(s.lists.proto).toEqual(["6", "17", "47"]);
    expect(s.groupBy).toBe("dst");
    expect(s.prefixLength).toEqual({ ipv4: 16, ipv6: 16 });
    expect(s.top).toBe(25);
  });

  test("sets aside what a link gets wrong and says why, keeping the rest", () => {
    const { state: s, problems } = parseSliceParams(
      new URLSearchParams("range=2h&metric=octets&groupBy=asn&top=0&prefixLength=ipv4:40&colour=blue&dport=443"),
    );
    expect(s).toEqual({ ...defaultSliceState(), lists: { ...defaultSliceState().lists, dport: ["443"] } });
    expect(problems).toHaveLength(6);
    expect(problems.join("\n")).toMatch(/range=2h is not one of 1h, 6h, 24h, 7d/);
    expect(problems.join("\n")).toMatch(/metric=octets is not one of bytes, packets, flows/);
    expect(problems.join("\n")).toMatch(/top=0 is not a whole number from 1 to 1000/);
    expect(problems.join("\n")).toMatch(/unknown parameter "colour"/);
  });

  test("a custom range needs a timezone and must end after it starts (RFC 3339 §5.6)", () => {
    expect(parseSliceParams(new URLSearchParams("from=2024-05-01T02:00Z&to=2024-05-01T03:00%2B01:00")).problems[0]).toMatch(/ends before it starts/);
    // A "+" typed into a link unencoded reads as a space; the offset is still meant.
    expect(parseSliceParams(new URLSearchParams("from=2024-05-01T02:00Z&to=2024-05-01T03:00+01:00")).problems[0]).toMatch(/ends before it starts/);
    const local = parseSliceParams(new URLSearchParams("from=2024-05-01T02:00&to=2024-05-01T03:00"));
    expect(local.state.range).toEqual({ preset: "24h" });
    expect(local.problems[0]).toMatch(/with a timezone/);
    expect(parseSliceParams(new URLSearchParams("from=2024-05-01T02:00Z&to=2024-05-01T04:00+01:00")).state.range).toEqual({
      from: Date.UTC(2024, 4, 1, 2),
      to: Date.UTC(2024, 4, 1, 3),
    });
  });
});

describe("the question as an estimate API call", () => {
  test("the API's own parser reads the call as the same question (fast-check)", () => {
    fc.assert(
      fc.property(state, fc.integer({ min: 0, max: Date.UTC(2100, 0, 1) }), (s, now) => {
        const search = estimateSearch(s, "riverline", now);
        expect(search.get("tenant")).toBe("riverline");
        search.delete("tenant");
        const parsed = parseEstimateSearchParams(search);
        const { from, to } = resolveRange(s.range, now);
        // The API refuses spans over 400 days; the form's presets never reach that, custom ranges may.
        if (to - from > 400 * 86_400_000) {
          expect(parsed.ok).toBe(false);
          return;
        }
        if (!parsed.ok) throw new Error(parsed.message);
        const q = parsed.query;
        expect([q.from, q.to]).toEqual([from, to]);
        expect(q.metric).toBe(s.metric);
        expect(q.top).toBe(s.top);
        expect(q.groupBy?.by ?? null).toBe(s.groupBy);
        if (q.groupBy && "prefixLength" in q.groupBy) expect(q.groupBy.prefixLength).toEqual(s.prefixLength);
        expect(q.where.src.map(formatPrefix)).toEqual(s.lists.src);
        expect(q.where.dstExclude.map(formatPrefix)).toEqual(s.lists.dstExclude);
        expect(q.where.dport.map((r) => (r.low === r.high ? String(r.low) : `${r.low}-${r.high}`))).toEqual(s.lists.dport);
        expect(q.where.proto.map(String)).toEqual(s.lists.proto);
        for (const field of ["srcAs", "dstAs", "inIf", "outIf"] as const) {
          expect(q.where[field].map((r) => (r.low === r.high ? String(r.low) : `${r.low}-${r.high}`))).toEqual(s.lists[field]);
        }
        expect(q.where.collectors).toEqual(s.lists.collectors);
        expect(q.unit).toBe(s.unit);
      }),
      { numRuns: 300 },
    );
  });

  test("the time series call groups by window, up to 1000, and drops the prefix length", () => {
    const s: SliceState = { ...defaultSliceState(), groupBy: "dst", top: 5 };
    const series = estimateSearch(s, "riverline", Date.UTC(2024, 4, 1, 2, 0, 30), { groupBy: "window", top: 1000 });
    expect(series.get("groupBy")).toBe("window");
    expect(series.get("top")).toBe("1000");
    expect(series.has("prefixLength")).toBe(false);
  });

  test("a preset ends at the next whole minute, so the open window is in and the call is the same for a minute", () => {
    const now = Date.UTC(2024, 4, 1, 2, 0, 30);
    expect(resolveRange({ preset: "1h" }, now)).toEqual({ from: Date.UTC(2024, 4, 1, 1, 1), to: Date.UTC(2024, 4, 1, 2, 1) });
    expect(resolveRange({ preset: "7d" }, now + 29_000)).toEqual(resolveRange({ preset: "7d" }, now));
    expect(formatInstant(Date.UTC(2024, 4, 1, 2, 0))).toBe("2024-05-01T02:00:00Z");
  });

  test("describes the question in one line without commas or quotes, for the CSV comment line", () => {
    fc.assert(
      fc.property(state, (s) => {
        const text = describeQuery(s, 0, 3_600_000, "bytes");
        expect(text).not.toMatch(/[,"\r\n]/);
        for (const field of LIST_FIELDS) for (const item of s.lists[field]) expect(text).toContain(item);
      }),
    );
  });
});
