import { createElement } from "react";
import { renderToStaticMarkup } from "react-dom/server";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { Headline } from "~/components/slice/Results";
import { SliceForm } from "~/components/slice/SliceForm";
import { collectorChoices } from "~/merges/merges.server";
import type { EstimateAnswer } from "~/query/answer";
import { defaultSliceState } from "~/slice/query-state";
import { flowRecordToJson } from "~/flow/record";
import { windowStartOf } from "~/ingest/window";
import { seededUniform } from "~/sampling/uniform";
import { benchRecords } from "../../scripts/bench/data";
import { keyFor, postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";

// The README's own export/import example ("Export pop-north's samples of two hours as a sample
// file …, then import the file as the reservoirs of another collector"), followed by the
// questions an engineer asks with no collector picked. Summing reservoirs is unbiased only for
// disjoint record streams (N. Duffield, C. Lund, M. Thorup, "Priority sampling for estimation of
// arbitrary subset sums", J. ACM 54(6), 2007: the merge and the sum over samples both assume
// it); north-archive holds a sample of pop-north's own records, so a default question must read
// exactly as it did before the import, and naming both must be refused unless asked for.

const HOUR_MS = 3_600_000;
const WINDOW_MS = 300_000;

/**
 * Equal up to the rounding of adding the same doubles in another order (the scan may read a
 * reservoir from memory or from SQLite): relative 1e-12 is far above that and far below any
 * record's share of a sum.
 */
function close(actual: number, expected: number, what: string): void {
  expect(Math.abs(actual - expected), `${what}: ${actual} against ${expected}`).toBeLessThanOrEqual(1e-12 * Math.abs(expected));
}

const html = (element: Parameters<typeof renderToStaticMarkup>[0]) => renderToStaticMarkup(element).replace(/&#x27;/g, "'");

interface Answer {
  estimate: number;
  ci95: [number, number];
  exact: { records: number; bytes: number; packets: number };
  collectors: string[];
  groups: { key: string; estimate: number; ci95: [number, number] }[];
  collectorRule: { rule: string; text: string; excluded: { collector: string; kind: string; of: string[] }[]; overlaps: { shared: string; code: string }[] };
  error?: { code: string; message: string };
}

describe("the README's export/import example, then questions with no collector picked", () => {
  let t: TestServer;
  let queryKey = "";
  let archiveKey = "";
  let archive2Key = "";
  let tenantId = 0;
  // The README's times: whole hours, [3 hours ago, 1 hour ago) for the export; six hours of traffic.
  const hour = Math.floor(Date.now() / HOUR_MS) * HOUR_MS;
  const from = hour - 6 * HOUR_MS;
  const to = hour + HOUR_MS;

  const estimate = async (body: Record<string, unknown>): Promise<{ status: number; answer: Answer }> => {
    const res = await fetch(`${t.url}/api/v1/estimate`, {
      method: "POST",
      headers: { authorization: `Bearer ${queryKey}`, "content-type": "application/json" },
      body: JSON.stringify({ from, to, ...body }),
    });
    return { status: res.status, answer: (await res.json()) as Answer };
  };
  /** The README's import: POST the file to /api/v1/samples?collector=NAME with that collector's key. */
  const importFile = (key: string, collector: string, file: string) =>
    fetch(`${t.url}/api/v1/samples?collector=${collector}`, { method: "POST", headers: { authorization: `Bearer ${key}`, "content-type": "application/json" }, body: file });
  const exportFile = async (collectors: string | null, fromMs: number, toMs: number) => {
    const params = new URLSearchParams({ from: new Date(fromMs).toISOString(), to: new Date(toMs).toISOString() });
    if (collectors !== null) params.set("collectors", collectors);
    const res = await fetch(`${t.url}/api/v1/samples?${params}`, { headers: { authorization: `Bearer ${queryKey}` } });
    expect(res.status).toBe(200);
    return res.text();
  };

  // The questions: the issue's /24 over six hours, the chart per window, and everything by collector.
  const QUESTIONS: Record<string, unknown>[] = [
    { where: { src: ["198.51.100.0/24"] } },
    { where: { src: ["198.51.100.0/24"] }, groupBy: "window", top: 1000 },
    { groupBy: "collector" },
    { metric: "packets", where: { dport: ["443"] } },
  ];
  const before: Answer[] = [];

  beforeAll(async () => {
    t = await startTestServer({ uniform: seededUniform(5) });
    const north = await tenantWithKey(t.server, "riverline", { collector: "pop-north", scope: "both", sampleSize: 16 });
    queryKey = north.key;
    tenantId = north.tenant.id;
    const south = await keyFor(t.server, north.tenant.id, "pop-south", "ingest");
    // The demo's third key: ingest only, for north-archive (scripts/demo-keys.ts).
    archiveKey = (await keyFor(t.server, north.tenant.id, "north-archive", "ingest")).key;
    archive2Key = (await keyFor(t.server, north.tenant.id, "north-archive-2", "ingest")).key;
    // Invented heavy-tailed traffic on documentation space (RFC 5737), two disjoint streams, six closed hours.
    for (const [key, seed] of [[north.key, 81], [south.key, 82]] as const) {
      const records = [...benchRecords(3000, from, hour, seed)].filter((r) => windowStartOf(r.start!, 300) < hour);
      const res = await postFlows(t.url, key, JSON.stringify(records.map(flowRecordToJson)));
      expect(res.status, await res.clone().text()).toBe(200);
    }
    for (const q of QUESTIONS) {
      const { status, answer } = await estimate(q);
      expect(status, JSON.stringify(answer)).toBe(200);
      before.push(answer);
    }
    expect(before[0].estimate).toBeGreaterThan(0);

    // The README's commands: export pop-north's two hours, import them into north-archive.
    const file = await exportFile("pop-north", hour - 3 * HOUR_MS, hour - HOUR_MS);
    const res = await importFile(archiveKey, "north-archive", file);
    const summary = await res.json();
    expect(res.status, JSON.stringify(summary)).toBe(200);
    expect(summary).toMatchObject({ collector: "north-archive", copyOf: ["pop-north"], windows: 24 });
  }, 120_000);
  afterAll(() => t?.close());

  it("answers every default question exactly as before the import (estimate, ci95, exact, groups)", async () => {
    for (const [i, q] of QUESTIONS.entries()) {
      const { status, answer } = await estimate(q);
      expect(status, JSON.stringify(answer)).toBe(200);
      const what = JSON.stringify(q);
      close(answer.estimate, before[i].estimate, what);
      close(answer.ci95[0], before[i].ci95[0], what);
      close(answer.ci95[1], before[i].ci95[1], what);
      // Exact counters are integers: equal.
      expect(answer.exact, what).toEqual(before[i].exact);
      expect(answer.groups.map((g) => g.key), what).toEqual(before[i].groups.map((g) => g.key));
      answer.groups.forEach((g, j) => {
        close(g.estimate, before[i].groups[j].estimate, `${what} ${g.key}`);
        close(g.ci95[0], before[i].groups[j].ci95[0], `${what} ${g.key}`);
        close(g.ci95[1], before[i].groups[j].ci95[1], `${what} ${g.key}`);
      });
      expect(answer.collectors).toEqual(["pop-north", "pop-south"]);
      // The answer says which rule applied, and what it left out.
      expect(answer.collectorRule.rule).toBe("every-stream");
      expect(answer.collectorRule.excluded).toEqual([expect.objectContaining({ collector: "north-archive", kind: "copy", of: ["pop-north"] })]);
      expect(answer.collectorRule.text).toMatch(/left out: north-archive \(copy of pop-north\)/);
    }
    // The copy counts when named alone: its exact bytes are pop-north's over the two exported hours.
    const { answer: copy } = await estimate({ where: { collectors: ["north-archive"] } });
    const { answer: origin } = await estimate({ from: hour - 3 * HOUR_MS, to: hour - HOUR_MS, where: { collectors: ["pop-north"] } });
    expect(copy.exact).toEqual(origin.exact);
    close(copy.estimate, origin.estimate, "the copy alone against its origin's two hours");
  });

  it("refuses a copy named with its origin (422 copy_with_origin, saying which rule), in JSON and in the query string", async () => {
    const { status, answer } = await estimate({ where: { collectors: ["pop-north", "north-archive"] } });
    expect(status, JSON.stringify(answer)).toBe(422);
    expect(answer.error!.code).toBe("copy_with_origin");
    expect(answer.error!.message).toMatch(/north-archive \(copy of pop-north\) holds a sample of pop-north's records/);
    expect(answer.error!.message).toMatch(/a copy counts only alone or with collectors whose records it does not hold/);
    expect(answer.error!.message).toMatch(/allowOverlap: true/);
    const get = await fetch(`${t.url}/api/v1/estimate?from=${from}&to=${to}&collectors=pop-north,north-archive`, { headers: { authorization: `Bearer ${queryKey}` } });
    expect(get.status).toBe(422);
    expect((await get.json()).error.code).toBe("copy_with_origin");
  });

  it("with allowOverlap answers the sum of both and states the overlap", async () => {
    const { status, answer } = await estimate({ where: { collectors: ["pop-north", "north-archive"] }, allowOverlap: true });
    expect(status, JSON.stringify(answer)).toBe(200);
    expect(answer.collectorRule.rule).toBe("overlap-allowed");
    expect(answer.collectorRule.overlaps).toEqual([expect.objectContaining({ code: "copy_with_origin", shared: "pop-north" })]);
    expect(answer.collectorRule.text).toMatch(/counted together on request \(allowOverlap\)/);
    // Independent reservoirs answer together by summing their estimates (DLT 2007): the two alone, added.
    const alone = await Promise.all(["pop-north", "north-archive"].map((c) => estimate({ where: { collectors: [c] } })));
    const sum = alone[0].answer.estimate + alone[1].answer.estimate;
    close(answer.estimate, sum, "both named with allowOverlap");
    expect(answer.exact.bytes).toBe(alone[0].answer.exact.bytes + alone[1].answer.exact.bytes);
    const get = await fetch(`${t.url}/api/v1/estimate?from=${from}&to=${to}&collectors=pop-north,north-archive&allowOverlap=true`, { headers: { authorization: `Bearer ${queryKey}` } });
    expect(get.status).toBe(200);
    close((await get.json()).estimate, answer.estimate, "the GET form");
  });

  it("refuses two copies of one origin, and a merge of a copy with its origin unless asked", async () => {
    // Another hour of pop-north, into a second copy: other windows, so the import itself is accepted.
    const file = await exportFile("pop-north", hour - 4 * HOUR_MS, hour - 3 * HOUR_MS);
    const res = await importFile(archive2Key, "north-archive-2", file);
    expect(res.status, await res.clone().text()).toBe(200);
    const { status, answer } = await estimate({ where: { collectors: ["north-archive", "north-archive-2"] } });
    expect(status).toBe(422);
    expect(answer.error!.message).toMatch(/both hold a sample of pop-north's records/);

    const merge = (allowOverlap?: boolean) =>
      fetch(`${t.url}/api/v1/merge`, {
        method: "POST",
        headers: { authorization: `Bearer ${queryKey}`, "content-type": "application/json" },
        body: JSON.stringify({ name: "north-twice", collectors: ["pop-north", "north-archive"], from, to, ...(allowOverlap === undefined ? {} : { allowOverlap }) }),
      });
    const refused = await merge();
    expect(refused.status).toBe(422);
    expect((await refused.json()).error).toMatchObject({ code: "copy_with_origin", message: expect.stringMatching(/north-archive \(copy of pop-north\)/) });
    const asked = await merge(true);
    expect(asked.status, await asked.clone().text()).toBe(201);
  });

  it("Slice shows the rule under the headline, copies apart in the picker, and the pair refused when both are picked", async () => {
    const { answer } = await estimate(QUESTIONS[0]);
    const headline = html(createElement(Headline, { answer: answer as unknown as EstimateAnswer, tenant: "riverline", state: defaultSliceState(), updating: false, windowSeconds: 300 }));
    expect(headline).toContain("data-collector-rule");
    expect(headline).toMatch(/left out: north-archive \(copy of pop-north\)/);

    const collectors = await collectorChoices(t.server.db, tenantId);
    expect(collectors.find((c) => c.name === "north-archive")).toEqual({ name: "north-archive", kind: "copy", inputs: ["pop-north"] });
    const state = { ...defaultSliceState(), lists: { ...defaultSliceState().lists, collectors: ["pop-north", "north-archive"] } };
    const form = html(createElement(SliceForm, { state, onChange: () => {}, collectors, weightAttribute: "bytes" }));
    expect(form).toContain("Copies (imported sample files)");
    expect(form).toContain("copy of pop-north");
    expect(form).toMatch(/role="alert"[^>]*>north-archive \(copy of pop-north\) holds a sample of pop-north's records, so naming both counts them twice: pick one of them\./);
  });

  it("exports copies only when named, like merges", async () => {
    const all = JSON.parse(await exportFile(null, hour - 3 * HOUR_MS, hour - HOUR_MS)) as { windows: { collector: string }[] };
    expect(new Set(all.windows.map((w) => w.collector))).toEqual(new Set(["pop-north", "pop-south"]));
    const named = JSON.parse(await exportFile("north-archive", hour - 3 * HOUR_MS, hour - HOUR_MS)) as { windows: { collector: string }[] };
    expect(named.windows).toHaveLength((2 * HOUR_MS) / WINDOW_MS);
  });
});
