import fc from "fast-check";
import { parse } from "csv-parse/sync";
import { describe, expect, test } from "vitest";
import type { EstimateAnswer } from "~/query/answer";
import { csvField, csvFileName, csvRecord, estimatesCsv } from "~/slice/csv";

/**
 * A reader written from the grammar of RFC 4180 §2 (file = record *(CRLF record) [CRLF];
 * escaped fields in DQUOTEs with "" for a quote), to check the writer against the standard
 * rather than against itself.
 */
function readRfc4180(text: string): string[][] {
  const records: string[][] = [];
  let fields: string[] = [];
  let i = 0;
  const atEnd = () => i >= text.length;
  for (;;) {
    let field = "";
    if (text[i] === '"') {
      i++;
      for (;;) {
        if (atEnd()) throw new Error("unterminated quoted field");
        if (text[i] === '"') {
          if (text[i + 1] === '"') {
            field += '"';
            i += 2;
            continue;
          }
          i++;
          break;
        }
        field += text[i++];
      }
    } else {
      while (!atEnd() && text[i] !== "," && text[i] !== "\r" && text[i] !== "\n") {
        if (text[i] === '"') throw new Error("a quote inside an unquoted field");
        field += text[i++];
      }
    }
    fields.push(field);
    if (text[i] === ",") {
      i++;
      continue;
    }
    records.push(fields);
    fields = [];
    if (atEnd()) return records;
    if (text.slice(i, i + 2) !== "\r\n") throw new Error(`expected CRLF at ${i}`);
    i += 2;
    if (atEnd()) return records;
  }
}

describe("CSV fields and records (RFC 4180 §2)", () => {
  test("quotes a field only when it holds a comma, a quote, CR or LF, doubling quotes (rules 6, 7)", () => {
    expect(csvField("198.51.100.0/24")).toBe("198.51.100.0/24");
    expect(csvField("2001:db8::/32")).toBe("2001:db8::/32");
    expect(csvField("a,b")).toBe('"a,b"');
    expect(csvField('say "hi"')).toBe('"say ""hi"""');
    expect(csvField("two\r\nlines")).toBe('"two\r\nlines"');
    expect(csvField("lf\nonly")).toBe('"lf\nonly"');
    expect(csvField("")).toBe("");
  });

  test("any fields come back unchanged through an RFC 4180 reader (fast-check)", () => {
    fc.assert(
      fc.property(fc.array(fc.array(fc.string({ unit: "grapheme-ascii" }), { minLength: 1, maxLength: 6 }), { minLength: 1, maxLength: 5 }), (rows) => {
        // A record of one empty field is an empty line, which a reader cannot tell from no record.
        fc.pre(rows.every((r) => !(r.length === 1 && r[0] === "")));
        const text = rows.map((r) => `${csvRecord(r)}\r\n`).join("");
        expect(readRfc4180(text)).toEqual(rows);
      }),
      { numRuns: 500 },
    );
  });
});

describe("the Slice export", () => {
  const answer: EstimateAnswer = {
    metric: "bytes",
    estimate: 1234.5,
    stdError: 10,
    ci95: [1214.9, 1254.1],
    kept: 40,
    rough: false,
    method: "normal",
    roughReason: null,
    matched: true,
    windows: 2,
    collectors: ["edge-1"],
    exact: { records: 90, bytes: 2000, packets: 30 },
    groups: [
      { key: "198.51.100.0/24", estimate: 1000, stdError: 8, ci95: [984.3, 1015.7], kept: 35, rough: false, method: "normal", roughReason: null, matched: true },
      {
        key: "edge,with comma",
        estimate: 234.5,
        stdError: 6,
        ci95: [222.7, 246.3],
        kept: 5,
        rough: true,
        method: "gamma",
        roughReason: "the normal approximation would be poor: 5 uncertain terms",
        matched: true,
      },
    ],
    from: "2024-05-01T02:00:00.000Z",
    to: "2024-05-01T03:00:00.000Z",
    resolution: [{ windowSeconds: 300, windows: 2, from: "2024-05-01T02:00:00.000Z", to: "2024-05-01T02:10:00.000Z" }],
  };
  const query = "from=2024-05-01T02:00:00Z; to=2024-05-01T03:00:00Z; metric=bytes; groupBy=src";
  const text = estimatesCsv(answer, "riverline", query);
  const header = ["key", "estimate", "std_error", "ci95_low", "ci95_high", "kept", "rough", "method", "rough_reason", "note"];

  test("a registry CSV parser (csv-parse) reads the first line as the header and the same number of fields on every line", () => {
    // csv-parse refuses records whose field count differs from the first (CSV_RECORD_INCONSISTENT_FIELDS_LENGTH)
    // unless told otherwise; a leading comment line, as spreadsheet tools read it, would become the header.
    const rows: string[][] = parse(text, { record_delimiter: "\r\n" });
    expect(rows[0]).toEqual(header);
    expect(rows).toHaveLength(1 + 1 + answer.groups.length);
    for (const row of rows) expect(row).toHaveLength(header.length);
    // The same text against the RFC 4180 grammar, CRLF after every line (rules 1–3).
    expect(readRfc4180(text)).toEqual(rows);
    expect(text.endsWith("\r\n")).toBe(true);
  });

  test("the whole subset, then each group with its interval; the caution in the last column of the first data line", () => {
    const records: Record<string, string>[] = parse(text, { columns: true });
    expect(records.map((r) => [r.key, r.estimate, r.std_error, r.ci95_low, r.ci95_high, r.kept, r.rough, r.method, r.rough_reason])).toEqual([
      ["total", "1234.5", "10", "1214.9", "1254.1", "40", "false", "normal", ""],
      ["198.51.100.0/24", "1000", "8", "984.3", "1015.7", "35", "false", "normal", ""],
      ["edge,with comma", "234.5", "6", "222.7", "246.3", "5", "true", "gamma", "the normal approximation would be poor: 5 uncertain terms"],
    ]);
    const note = records[0].note;
    expect(note).toMatch(/^Weir estimates for tenant riverline are statistical/);
    expect(note).toMatch(/for billing use exact counts/);
    // The caution names each interval method the file may hold (app/sampling/interval.ts).
    expect(note).toMatch(/normal = estimate ± 1.96 SE/);
    expect(note).toMatch(/gamma = Fay-Feuer/);
    expect(note).toMatch(/no-match = no sampled record matched/);
    expect(note).toContain(`Query: ${query}`);
    expect(records.slice(1).map((r) => r.note)).toEqual(["", ""]);
  });

  test("numbers round-trip: each figure read back by csv-parse is the same double (fast-check)", () => {
    const figure = fc.double({ min: 0, max: 1e18, noNaN: true });
    fc.assert(
      fc.property(fc.array(fc.tuple(figure, figure, figure, figure), { minLength: 1, maxLength: 5 }), (figures) => {
        const groups = figures.map(([estimate, stdError, low, high], i) => ({ ...answer.groups[0], key: `198.51.100.${i}/32`, estimate, stdError, ci95: [low, high] as [number, number] }));
        const records: Record<string, string>[] = parse(estimatesCsv({ ...answer, groups }, "riverline", query), { columns: true, cast: false });
        records.slice(1).forEach((r, i) => {
          expect(Number(r.estimate)).toBe(groups[i].estimate);
          expect(Number(r.std_error)).toBe(groups[i].stdError);
          expect(Number(r.ci95_low)).toBe(groups[i].ci95[0]);
          expect(Number(r.ci95_high)).toBe(groups[i].ci95[1]);
          expect(Number(r.kept)).toBe(groups[i].kept);
        });
      }),
      { numRuns: 200 },
    );
  });

  test("names the file after tenant, metric, grouping and start", () => {
    expect(csvFileName("riverline", "bytes", "dst", Date.UTC(2024, 4, 1, 2, 0))).toBe("weir-riverline-bytes-by-dst-20240501T0200Z.csv");
    expect(csvFileName("riverline", "flows", null, Date.UTC(2024, 4, 1, 2, 0))).toBe("weir-riverline-flows-20240501T0200Z.csv");
  });
});
