import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { FILTER_FIELDS, GROUP_BY, QUERY_FIELDS, queryFieldsMarkdown } from "~/query/fields";
import { parseEstimateRequest, parseEstimateSearchParams } from "~/query/request";

// docs/query-fields.md is generated from the field table (scripts/docs-query-fields.ts), and the
// table is what the request schema is built from: the page a reader trusts must be the one
// the API enforces.

const doc = () => readFileSync(new URL("../../docs/query-fields.md", import.meta.url), "utf8");

describe("docs/query-fields.md", () => {
  it("equals what the field table generates (rerun `npx tsx scripts/docs-query-fields.ts` after changing app/query/fields.ts)", () => {
    expect(doc()).toBe(queryFieldsMarkdown());
  });

  it("lists every filter the API takes and every group-by it accepts, and nothing it refuses", () => {
    const rows = doc()
      .split("\n")
      .filter((line) => /^\| `/.test(line))
      .map((line) => line.split(" | ").map((cell) => cell.replace(/^\| /, "")));
    expect(rows.map((r) => r[0])).toEqual(QUERY_FIELDS.map((f) => `\`${f.name}\``));
    for (const [name, items] of rows.map((r) => [r[0].slice(1, -1), r[1]])) {
      if (items === "—") continue;
      // Each documented filter parses as an empty list in JSON and in a query string.
      expect(parseEstimateRequest({ from: 0, to: 1, where: { [name]: [] } }).ok, name).toBe(true);
      const asked = parseEstimateSearchParams(new URLSearchParams({ from: "0", to: "1", [name]: "x" }));
      const unknown = asked.ok ? [] : asked.details.filter((d) => /not a known/.test(d.message));
      expect(unknown, name).toEqual([]);
    }
    const documentedGroups = rows.map((r) => /^`(\w+)`/.exec(r[3])?.[1]).filter((g): g is string => g !== undefined);
    expect(documentedGroups).toEqual([...GROUP_BY]);
    for (const by of documentedGroups) expect(parseEstimateRequest({ from: 0, to: 1, groupBy: by }).ok, by).toBe(true);
    expect(parseEstimateRequest({ from: 0, to: 1, where: { asNumber: [] } }).ok).toBe(false);
    expect(FILTER_FIELDS.length).toBe(rows.filter((r) => r[1] !== "—").length);
  });

  it("is linked from the README", () => {
    expect(readFileSync(new URL("../../README.md", import.meta.url), "utf8")).toContain("docs/query-fields.md");
  });
});
