import { createElement } from "react";
import { renderToStaticMarkup } from "react-dom/server";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import { IntakeTable } from "~/components/intake/IntakeTable";
import { windowStartOf } from "~/ingest/window";
import type { IntakeSnapshot } from "~/routes/console.intake-data";
import { formatRate } from "~/slice/format";
import { postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";
import { signIn, type SignedIn } from "../helpers/session";

// Intake shows bit/s beside the exact bytes of each window: the window's bytes × 8 (bits per
// octet, RFC 791 §3.1 counts octets) ÷ its length in seconds, and for the open window ÷ the
// seconds passed so far. The snapshot is the real one of /t/:tenant/intake-data after batches
// posted through the ingest API; the expected rates are computed here from the bytes sent.

const WINDOW_SECONDS = 300;
const WINDOW_MS = WINDOW_SECONDS * 1000;

describe("Intake: bit/s per window", () => {
  let t: TestServer;
  let viewer: SignedIn;
  let open = 0;
  const bytesSent = new Map<number, number>();

  beforeAll(async () => {
    t = await startTestServer();
    const riverline = await tenantWithKey(t.server, "riverline", { collector: "edge-1", windowSeconds: WINDOW_SECONDS });
    await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, "vera@example.com")).id, riverline.tenant.id, "viewer");
    viewer = await signIn(t.url, "vera-viewer");
    open = windowStartOf(Date.now(), WINDOW_SECONDS);
    // Invented records in documentation space (RFC 5737): the open window and the one before it.
    const records = [0, 1].flatMap((back) =>
      Array.from({ length: 20 }, (_, i) => ({
        src: `198.51.100.${i}`,
        dst: "203.0.113.7",
        proto: 6,
        dport: 443,
        bytes: 1_000 + 977 * i + back * 50_000,
        packets: 3,
        start: open - back * WINDOW_MS + i,
      })),
    );
    for (const r of records) {
      const start = windowStartOf(r.start, WINDOW_SECONDS);
      bytesSent.set(start, (bytesSent.get(start) ?? 0) + r.bytes);
    }
    const res = await postFlows(t.url, riverline.key, JSON.stringify(records));
    expect(res.status, await res.clone().text()).toBe(200);
  });
  afterAll(() => t?.close());

  it("closed windows: exact bytes × 8 / 300 s; the open window: ÷ the seconds passed, marked so far", async () => {
    const res = await viewer.fetch("/t/riverline/intake-data");
    expect(res.status).toBe(200);
    const snapshot = (await res.json()) as IntakeSnapshot;
    const html = renderToStaticMarkup(createElement(IntakeTable, { snapshot }));
    const rates = [...html.matchAll(/data-bit-rate="([^"]+)"/g)].map((m) => Number(m[1]));
    // One per window of the single collector (no "All collectors" line with one collector).
    expect(rates).toHaveLength(snapshot.windows.length);
    snapshot.windows.forEach((start, i) => {
      const bytes = bytesSent.get(start) ?? 0;
      const closed = start + WINDOW_MS <= snapshot.now;
      const seconds = closed ? WINDOW_SECONDS : Math.min(WINDOW_SECONDS, Math.max(1, (snapshot.now - start) / 1000));
      expect(rates[i]).toBe((bytes * 8) / seconds);
      if (bytes > 0) expect(html).toContain(formatRate((bytes * 8) / seconds, "bytes") + (closed ? "" : " so far"));
    });
    expect(snapshot.windows.at(-1)).toBe(snapshot.now - (snapshot.now % WINDOW_MS));
    expect(html).toContain("Bytes and bit/s per window");
  });
});
