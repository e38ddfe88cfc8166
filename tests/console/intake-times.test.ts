// Intake shows, per collector, the records accepted late, accepted with a time ahead of the server
// clock, refused for their times, and the IPFIX elements of JSON records Weir ignored: counted at
// ingest (app/ingest/time-check.ts, app/flow/record.ts) into the collectors table, read by
// /t/:tenant/intake-data and drawn by IntakeTable.
import { createElement } from "react";
import { renderToStaticMarkup } from "react-dom/server";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import { IntakeTable } from "~/components/intake/IntakeTable";
import type { IntakeSnapshot } from "~/routes/console.intake-data";
import { postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";
import { signIn, type SignedIn } from "../helpers/session";

const record = { src: "198.51.100.7", dst: "203.0.113.9", proto: 6, bytes: 1500, packets: 2 };

describe("Intake: record times and ignored fields per collector", () => {
  let t: TestServer;
  let viewer: SignedIn;
  let snapshot: IntakeSnapshot;

  beforeAll(async () => {
    t = await startTestServer();
    const { tenant, key } = await tenantWithKey(t.server, "riverline", { collector: "edge-1" });
    await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, "vera@example.com")).id, tenant.id, "viewer");
    viewer = await signIn(t.url, "vera-viewer");
    const now = Date.now();
    // Two windows back (5-minute windows): late whatever the time; 200 s ahead: within the default 300 s tolerance.
    const accepted = await postFlows(t.url, key, JSON.stringify([
      { ...record, start: now - 600_000, tcpControlBits: 18, vlanId: 10 },
      { ...record, start: now + 200_000 },
      { ...record, start: now, ipClassOfService: 0 },
    ]));
    expect(accepted.status, await accepted.clone().text()).toBe(200);
    expect(await accepted.json()).toMatchObject({ accepted: 3, late: 1, clockSkewed: 1, ignoredFields: { tcpControlBits: 1, vlanId: 1, ipClassOfService: 1 } });
    // Epoch seconds sent as milliseconds (before INGEST_TIME_FLOOR): the batch is refused, both records counted.
    const seconds = Math.floor(now / 1000);
    const refused = await postFlows(t.url, key, JSON.stringify([{ ...record, start: seconds }, { ...record, start: seconds + 1 }]));
    expect(refused.status).toBe(400);
    const res = await viewer.fetch("/t/riverline/intake-data");
    expect(res.status).toBe(200);
    snapshot = (await res.json()) as IntakeSnapshot;
  }, 60_000);
  afterAll(() => t?.close());

  it("reads the collector's counters", () => {
    expect(snapshot.collectors.map((c) => [c.name, c.timeChecks])).toEqual([["edge-1", { late: 1, clockSkewed: 1, refused: 2, ignoredFields: 3 }]]);
  });

  it("shows them under their headings, with what each counts", () => {
    const html = renderToStaticMarkup(createElement(IntakeTable, { snapshot }));
    expect(html).toContain("Record times");
    expect(html).toContain("late · clock ahead · refused");
    expect(html).toContain("Ignored fields");
    expect(html).toMatch(/title="Accepted with a start before the open window[^"]*" class="[^"]*">1</);
    expect(html).toMatch(/title="Accepted with a start or end ahead of the server clock[^"]*" class="[^"]*">1</);
    expect(html).toMatch(/title="Refused for their times[^"]*" class="[^"]*">2</);
    expect(html).toMatch(/title="Fields of accepted JSON records that name an IANA IPFIX element[^"]*"><span[^>]*>3</);
  });
});
