// The shared date-time reader (app/time/rfc3339.ts) against RFC 3339 ("Date and Time on the
// Internet: Timestamps"): its §5.8 examples with the instants the RFC says they denote, its
// §5.6 grammar (and the NOTE on "t", "z" and a space), the §5.7 restrictions, and ECMAScript's
// Date.parse (ECMA-262 §21.4.3.2 reads the same date-time form) where both read a text.
import { describe, expect, test } from "vitest";
import { parseRfc3339 } from "~/time/rfc3339";

const utc = Date.UTC;

describe("RFC 3339 §5.8 examples", () => {
  test("1985-04-12T23:20:50.52Z is 20 min 50.52 s after 23:00 of 1985-04-12 UTC (§5.8)", () => {
    expect(parseRfc3339("1985-04-12T23:20:50.52Z")).toBe(utc(1985, 3, 12, 23, 20, 50, 520));
  });
  test("1996-12-19T16:39:57-08:00 equals 1996-12-20T00:39:57Z (§5.8)", () => {
    expect(parseRfc3339("1996-12-19T16:39:57-08:00")).toBe(utc(1996, 11, 20, 0, 39, 57));
  });
  test("1990-12-31T23:59:60Z and 1990-12-31T15:59:60-08:00 are the same leap second (§5.8), kept as 23:59:59.999Z", () => {
    // Weir's choice (module comment): POSIX milliseconds have no 61st second; the leap second stays in its UTC day.
    expect(parseRfc3339("1990-12-31T23:59:60Z")).toBe(utc(1990, 11, 31, 23, 59, 59, 999));
    expect(parseRfc3339("1990-12-31T15:59:60-08:00")).toBe(utc(1990, 11, 31, 23, 59, 59, 999));
  });
  test("1937-01-01T12:00:27.87+00:20 is 1937-01-01T11:40:27.87Z (§5.8), before 1970 so negative", () => {
    expect(parseRfc3339("1937-01-01T12:00:27.87+00:20")).toBe(utc(1937, 0, 1, 11, 40, 27, 870));
  });
});

describe("RFC 3339 §5.6 grammar", () => {
  const T = utc(2024, 4, 1, 2, 0, 0);

  test("NOTE of §5.6: 't' and 'z' may be lower case, and a space may stand for 'T'", () => {
    expect(parseRfc3339("2024-05-01t02:00:00z")).toBe(T);
    expect(parseRfc3339("2024-05-01 02:00:00Z")).toBe(T);
  });

  test("time-secfrac is '.' 1*DIGIT: any number of digits, truncated to the millisecond", () => {
    expect(parseRfc3339("2024-05-01T02:00:00.5Z")).toBe(T + 500);
    expect(parseRfc3339("2024-05-01T02:00:00.123999999999Z")).toBe(T + 123);
    expect(parseRfc3339("2024-05-01T02:00:00.Z")).toMatch(/^must be RFC 3339/);
    expect(parseRfc3339("2024-05-01T02:00:00,5Z")).toMatch(/after "\."/); // ISO 8601's comma is not in RFC 3339
  });

  test("time-numoffset is ± hh:mm with hours 00–23 and minutes 00–59; -00:00 (§4.3) is UTC", () => {
    expect(parseRfc3339("2024-05-01T04:00:00+02:00")).toBe(T);
    expect(parseRfc3339("2024-04-30T23:30:00-02:30")).toBe(T);
    expect(parseRfc3339("2024-05-01T02:00:00-00:00")).toBe(T);
    expect(parseRfc3339("2024-05-01T02:00:00+24:00")).toMatch(/impossible offset/);
    expect(parseRfc3339("2024-05-01T02:00:00+02:60")).toMatch(/impossible offset/);
    expect(parseRfc3339("2024-05-01T02:00:00+0200")).toMatch(/^must be RFC 3339/);
  });

  test("partial-time requires seconds, and date-time requires an offset (§4.4)", () => {
    expect(parseRfc3339("2024-05-01T02:00Z")).toMatch(/^needs seconds \(RFC 3339 §5.6 partial-time\): 2024-05-01T02:00:00Z/);
    expect(parseRfc3339("2024-05-01T02:00:00")).toMatch(/^needs an offset/);
    expect(parseRfc3339("2024-05-01T02:00")).toBe("needs seconds and an offset (RFC 3339 §5.6 date-time), e.g. 2024-05-01T02:00:00Z");
  });

  test("full-date alone only where asked for, as UTC midnight", () => {
    expect(parseRfc3339("2024-05-01")).toMatch(/^needs a time and an offset/);
    expect(parseRfc3339("2024-05-01", { date: true })).toBe(utc(2024, 4, 1));
    expect(parseRfc3339("2024-02-30", { date: true })).toMatch(/^is not a real date/);
  });

  test("§5.7: mday by month and leap year; hour 00–23, minute 00–59", () => {
    expect(parseRfc3339("2024-02-29T00:00:00Z")).toBe(utc(2024, 1, 29)); // 2024 is a leap year
    expect(parseRfc3339("2023-02-29T00:00:00Z")).toMatch(/^is not a real date and time/);
    expect(parseRfc3339("2000-02-29T00:00:00Z")).toBe(utc(2000, 1, 29)); // divisible by 400: leap (Appendix C)
    expect(parseRfc3339("1900-02-29T00:00:00Z")).toMatch(/^is not a real date and time/); // divisible by 100 only: not
    expect(parseRfc3339("2024-04-31T00:00:00Z")).toMatch(/^is not a real date and time/);
    expect(parseRfc3339("2024-05-01T24:00:00Z")).toMatch(/^is not a real date and time/);
    expect(parseRfc3339("2024-05-01T02:60:00Z")).toMatch(/^is not a real date and time/);
    expect(parseRfc3339("2024-13-01T00:00:00Z")).toMatch(/^is not a real date and time/);
  });

  test("§5.7: a leap second only in the last minute of a month's last day, in UTC", () => {
    expect(parseRfc3339("2016-12-31T23:59:60Z")).toBe(utc(2016, 11, 31, 23, 59, 59, 999));
    expect(parseRfc3339("2015-06-30T23:59:60.5Z")).toBe(utc(2015, 5, 30, 23, 59, 59, 999));
    expect(parseRfc3339("2016-12-30T23:59:60Z")).toMatch(/leap second/);
    expect(parseRfc3339("2016-12-31T22:59:60Z")).toMatch(/leap second/);
    expect(parseRfc3339("2016-12-31T23:59:60+01:00")).toMatch(/leap second/); // that is 22:59:60 UTC
    expect(parseRfc3339("2016-12-31T23:59:61Z")).toMatch(/^is not a real date and time/);
  });

  test("date-fullyear is 4DIGIT: years 0000–0099 are read as written", () => {
    expect(parseRfc3339("0099-01-01T00:00:00Z")).toBe(new Date("0099-01-01T00:00:00Z").getTime());
    expect(parseRfc3339("0001-01-01T00:00:00Z")).toBe(-62135596800000); // ECMA-262 §21.4.1: day 0 is 1970-01-01, proleptic Gregorian
    expect(parseRfc3339("10000-01-01T00:00:00Z")).toMatch(/^must be RFC 3339/);
  });

  test.each([
    "", "2024", "2024-05", "2024-5-01T00:00:00Z", "2024-05-01X02:00:00Z", "2024-05-01T2:00:00Z", "2024-05-01T02:00:00ZZ",
    "2024-W18-3T00:00:00Z", "2024-122T00:00:00Z", "+2024-05-01T00:00:00Z", "2024-05-01T02:00:00 Z", " 2024-05-01T02:00:00Z",
  ])("%j is not RFC 3339 date-time", (text) => {
    expect(typeof parseRfc3339(text)).toBe("string");
    expect(typeof parseRfc3339(text, { date: true })).toBe("string");
  });
});

describe("agreement with Date.parse (ECMA-262 date-time string format) where both read the text", () => {
  // A seeded generator (mulberry32, common practice) of texts in the form both read: upper-case
  // T and Z or an offset, 0–3 fraction digits, real days, seconds 00–59.
  function mulberry32(seed: number) {
    return () => {
      seed = (seed + 0x6d2b79f5) | 0;
      let t = Math.imul(seed ^ (seed >>> 15), 1 | seed);
      t = (t + Math.imul(t ^ (t >>> 7), 61 | t)) ^ t;
      return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
    };
  }
  const pad = (n: number, width = 2) => String(n).padStart(width, "0");

  test("10 000 random date-times give the same epoch milliseconds", () => {
    const random = mulberry32(3339);
    const int = (low: number, high: number) => low + Math.floor(random() * (high - low + 1));
    const differences: string[] = [];
    for (let n = 0; n < 10_000; n++) {
      const year = int(1000, 9999);
      const month = int(1, 12);
      const day = int(1, new Date(Date.UTC(year, month, 0)).getUTCDate());
      const fraction = ["", `.${pad(int(0, 9), 1)}`, `.${pad(int(0, 99))}`, `.${pad(int(0, 999), 3)}`][int(0, 3)];
      const offset = random() < 0.3 ? "Z" : `${random() < 0.5 ? "+" : "-"}${pad(int(0, 23))}:${pad(int(0, 59))}`;
      const text = `${pad(year, 4)}-${pad(month)}-${pad(day)}T${pad(int(0, 23))}:${pad(int(0, 59))}:${pad(int(0, 59))}${fraction}${offset}`;
      const reference = Date.parse(text);
      if (Number.isNaN(reference)) continue;
      if (parseRfc3339(text) !== reference) differences.push(`${text}: ${parseRfc3339(text)} vs Date.parse ${reference}`);
    }
    expect(differences).toEqual([]);
  });
});
