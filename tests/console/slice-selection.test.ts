import { createElement } from "react";
import { renderToStaticMarkup } from "react-dom/server";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import { GroupsTable } from "~/components/slice/Results";
import { SIMULTANEOUS_EXPLANATION } from "~/components/slice/Selection";
import { buildAnswer } from "~/query/answer";
import { rankGroups } from "~/query/selection";
import { estimatesCsv } from "~/slice/csv";
import { parse } from "csv-parse/sync";
import { defaultSliceState, estimateSearch, parseSliceParams, sliceParams } from "~/slice/query-state";
import { seededUniform } from "~/sampling/uniform";
import { postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";
import { signIn, type SignedIn } from "../helpers/session";
import { byPortQuery, sampleTrial, simPopulation, T0 } from "../query/selection-sim";

// The Slice page discloses how the top groups were chosen: the answer's selection note beside
// the group table, a joint (Bonferroni) 95% column with one line explaining it, the note in the
// CSV export's header comment, and a control for rank=split. The winner's curse itself is
// measured in tests/query/selection.test.ts; here we check that the words reach the reader.

function answerFor(rank: "estimate" | "split") {
  const reservoirs = sampleTrial(simPopulation(20, 150, 20240501), 64, seededUniform(5), 0);
  const { selection, ...result } = rankGroups(reservoirs, byPortQuery(5), rank);
  return buildAnswer({
    metric: "bytes",
    result,
    windows: 4,
    collectors: ["edge-1"],
    exact: { records: 3000n, bytes: 1_000_000n, packets: 3000n },
    from: T0,
    to: T0 + 1_200_000,
    selection,
  });
}

describe("the group table and the CSV carry the selection note", () => {
  const state = { ...defaultSliceState(), groupBy: "dport" as const, top: 5 };

  it("plain ranking: the winner's-curse note and a joint 95% column beside the group table", () => {
    const answer = answerFor("estimate");
    const html = renderToStaticMarkup(createElement(GroupsTable, { answer, by: "dport", state }));
    expect(html).toContain("tend to be overstated (the winner&#x27;s curse)");
    expect(html).toContain("the true top groups may differ");
    expect(html).toContain("Joint 95%");
    expect(html).toContain(SIMULTANEOUS_EXPLANATION.slice(0, 21)); // "Joint 95%: all listed"
    expect(html).toContain('data-selection="estimate"');
  });

  it("split ranking: the table says the groups were ranked on half A and estimated on half B", () => {
    const html = renderToStaticMarkup(createElement(GroupsTable, { answer: answerFor("split"), by: "dport", state: { ...state, rank: "split" as const } }));
    expect(html).toContain("Ranked on half A, estimated on half B.");
    expect(html).toContain('data-selection="split"');
  });

  it("the CSV caution (the note column of the first data line, read with csv-parse) holds the selection note", () => {
    const csv = estimatesCsv(answerFor("estimate"), "riverline", "top=5");
    const records: Record<string, string>[] = parse(csv, { columns: true });
    expect(records[0].note).toContain("tend to be overstated (the winner's curse)");
  });
});

describe("rank in the Slice question", () => {
  it("rank=split survives the page URL and is sent with the group-by, not with the time series", () => {
    const state = parseSliceParams(new URLSearchParams("groupBy=dst&rank=split")).state;
    expect(state.rank).toBe("split");
    expect(sliceParams(state).get("rank")).toBe("split");
    expect(estimateSearch(state, "riverline", T0).get("rank")).toBe("split");
    expect(estimateSearch(state, "riverline", T0, { groupBy: "window", top: 1000 }).has("rank")).toBe(false);
    expect(parseSliceParams(new URLSearchParams("groupBy=dst&rank=best")).problems).toEqual(["rank=best is not one of estimate, split; ranking on the estimates."]);
  });
});

describe("the Slice page", () => {
  let t: TestServer;
  let viewer: SignedIn;
  beforeAll(async () => {
    t = await startTestServer();
    const riverline = await tenantWithKey(t.server, "riverline", { scope: "both", sampleSize: 64 });
    await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, "vera@example.com")).id, riverline.tenant.id, "viewer");
    // The form shows once the tenant has flows (invented, RFC 5737 addresses).
    const flows = [{ src: "198.51.100.7", dst: "203.0.113.9", sport: 40000, dport: 443, proto: 6, bytes: 1500, packets: 2, start: T0 }];
    expect((await postFlows(t.url, riverline.key, JSON.stringify(flows))).status).toBe(200);
    viewer = await signIn(t.url, "vera-viewer");
  });
  afterAll(() => t?.close());

  it("offers 'Rank on one half, estimate on the other' with a group-by, checked by rank=split in the link", async () => {
    const html = await (await viewer.fetch("/t/riverline/slice?groupBy=dst&rank=split")).text();
    expect(html).toContain("Rank on one half, estimate on the other");
    expect(html).toMatch(/<input[^>]*type="checkbox"[^>]*checked=""/);
    const plain = await (await viewer.fetch("/t/riverline/slice")).text();
    expect(plain).not.toContain("Rank on one half, estimate on the other");
  });
});
