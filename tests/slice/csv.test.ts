import fc from "fast-check";
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
  const text = estimatesCsv(answer, "riverline", "from=2024-05-01T02:00:00Z; to=2024-05-01T03:00:00Z; metric=bytes; groupBy=src");
  const lines = text.split("\r\n");

  test("opens with a comment line: statistical, not for billing, and the query; no comma or quote in it", () => {
    expect(lines[0]).toMatch(/^# Weir estimates for tenant riverline are statistical/);
    expect(lines[0]).toMatch(/for billing use exact counts/);
    // The caution names each interval method the file may hold (app/sampling/interval.ts).
    expect(lines[0]).toMatch(/normal = estimate ± 1.96 SE/);
    expect(lines[0]).toMatch(/gamma = Fay-Feuer/);
    expect(lines[0]).toMatch(/no-match = no sampled record matched/);
    expect(lines[0]).toContain("Query: from=2024-05-01T02:00:00Z; to=2024-05-01T03:00:00Z; metric=bytes; groupBy=src");
    expect(lines[0]).not.toMatch(/[,"]/);
  });

  test("then the columns, the whole subset and each group with its interval, CRLF after every line (rules 1–3)", () => {
    expect(text.endsWith("\r\n")).toBe(true);
    expect(text.replace(/\r\n/g, "")).not.toMatch(/[\r\n]/);
    const records = readRfc4180(text.slice(text.indexOf("\r\n") + 2));
    expect(records).toEqual([
      ["key", "estimate", "std_error", "ci95_low", "ci95_high", "kept", "rough", "method", "rough_reason"],
      ["total", "1234.5", "10", "1214.9", "1254.1", "40", "false", "normal", ""],
      ["198.51.100.0/24", "1000", "8", "984.3", "1015.7", "35", "false", "normal", ""],
      ["edge,with comma", "234.5", "6", "222.7", "246.3", "5", "true", "gamma", "the normal approximation would be poor: 5 uncertain terms"],
    ]);
  });

  test("names the file after tenant, metric, grouping and start", () => {
    expect(csvFileName("riverline", "bytes", "dst", Date.UTC(2024, 4, 1, 2, 0))).toBe("weir-riverline-bytes-by-dst-20240501T0200Z.csv");
    expect(csvFileName("riverline", "flows", null, Date.UTC(2024, 4, 1, 2, 0))).toBe("weir-riverline-flows-20240501T0200Z.csv");
  });
});
