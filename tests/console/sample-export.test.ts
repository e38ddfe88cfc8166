import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import { flowRecordToJson } from "~/flow/record";
import { windowStartOf } from "~/ingest/window";
import { parseSampleFile } from "~/samples/document";
import { formatUtcMinute } from "~/slice/format";
import { benchRecords } from "../../scripts/bench/data";
import { keyFor, postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";
import { signIn, type SignedIn } from "../helpers/session";

// The Merge page's sample export (GET /t/:tenant/merge/export) against a real server: the file
// it sends must be the very sample document GET /api/v1/samples answers for the same range
// (docs/sample-file.md), read back with the project's sample-file parser; only engineers and
// admins get it (the access matrix, tests/console/matrix.test.ts, covers every role); each
// export is written to the Ledger.

const WINDOW_MS = 300_000;

describe("the console's sample export", () => {
  let t: TestServer;
  let queryKey = "";
  let eli: SignedIn;
  let ada: SignedIn;
  let from = 0;
  let to = 0;

  beforeAll(async () => {
    t = await startTestServer();
    const riverline = await tenantWithKey(t.server, "riverline", { collector: "pop-north", sampleSize: 32, scope: "both" });
    queryKey = riverline.key;
    const south = await keyFor(t.server, riverline.tenant.id, "pop-south");
    for (const [email, role] of [["eli@example.com", "engineer"], ["ada@example.com", "admin"], ["vera@example.com", "viewer"]] as const) {
      await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, email)).id, riverline.tenant.id, role);
    }
    // Invented traffic on documentation space over the last half hour, more records than k, so τ > 0.
    to = windowStartOf(Date.now(), 300) - WINDOW_MS;
    from = to - 4 * WINDOW_MS;
    for (const [key, seed] of [[riverline.key, 71], [south.key, 72]] as const) {
      const res = await postFlows(t.url, key, JSON.stringify([...benchRecords(300, from, to, seed)].map(flowRecordToJson)));
      expect(res.status).toBe(200);
    }
    eli = await signIn(t.url, "eli-engineer");
    ada = await signIn(t.url, "ada-admin");
  });
  afterAll(() => t?.close());

  const apiExport = async (query: string) => {
    const res = await fetch(`${t.url}/api/v1/samples?${query}`, { headers: { authorization: `Bearer ${queryKey}` } });
    expect(res.status).toBe(200);
    return (await res.json()) as Record<string, unknown>;
  };
  const withoutExportTime = ({ exportedAt: _, ...rest }: Record<string, unknown>) => rest;

  it("sends the API's own sample file as a download, for the console's UTC times and chosen collectors", async () => {
    // The form's fields as the page sends them: 24-hour UTC text and one checkbox value per collector.
    const query = new URLSearchParams({ from: formatUtcMinute(from), to: formatUtcMinute(to) });
    query.append("collectors", "pop-north");
    query.append("collectors", "pop-south");
    const res = await eli.fetch(`/t/riverline/merge/export?${query}`);
    expect(res.status).toBe(200);
    expect(res.headers.get("content-type")).toMatch(/^application\/json/);
    // RFC 6266 §4.1: an attachment with a file name, so the browser saves it.
    expect(res.headers.get("content-disposition")).toMatch(/^attachment; filename="weir-samples-riverline-\d{8}T\d{4}Z-\d{8}T\d{4}Z\.json"$/);
    const text = await res.text();
    const file = JSON.parse(text) as Record<string, unknown>;

    // Parses as a sample document, and equals the API's export of the same range (all but the export's own time).
    const set = parseSampleFile(text);
    expect(set.from).toBe(from);
    expect(set.to).toBe(to);
    expect(new Set(set.windows.map((w) => w.collector))).toEqual(new Set(["pop-north", "pop-south"]));
    expect(set.windows.some((w) => w.tau > 0)).toBe(true);
    const api = await apiExport(`from=${new Date(from).toISOString()}&to=${new Date(to).toISOString()}&collectors=pop-north,pop-south`);
    expect(withoutExportTime(file)).toEqual(withoutExportTime(api));

    // No collector chosen: every stream collector, as the API's default.
    const every = await eli.fetch(`/t/riverline/merge/export?${new URLSearchParams({ from: formatUtcMinute(from), to: formatUtcMinute(to) })}`);
    expect(every.status).toBe(200);
    expect(withoutExportTime((await every.json()) as Record<string, unknown>)).toEqual(withoutExportTime(await apiExport(`from=${from}&to=${to}`)));
  });

  it("writes each export to the Ledger with who made it, the range and the collectors", async () => {
    const query = new URLSearchParams({ from: formatUtcMinute(from), to: formatUtcMinute(to), collectors: "pop-north" });
    expect((await ada.fetch(`/t/riverline/merge/export?${query}`)).status).toBe(200);
    const ledger = (await (await ada.fetch("/t/riverline/ledger?action=samples.export&actor=ada-admin")).text()).replaceAll("<!-- -->", "");
    const rows = [...ledger.matchAll(/<tr [^>]*data-action="samples.export"[\s\S]*?<\/tr>/g)].map((m) => m[0]);
    expect(rows).toHaveLength(1);
    expect(rows[0]).toContain("ada-admin");
    expect(rows[0]).toContain("pop-north");
    expect(rows[0]).toContain(`${formatUtcMinute(from)} – ${formatUtcMinute(to)} UTC`);
  });

  it("refuses a bad range with a 400 and the reason in JSON, and a viewer with 403", async () => {
    const backwards = await eli.fetch(`/t/riverline/merge/export?${new URLSearchParams({ from: formatUtcMinute(to), to: formatUtcMinute(from) })}`);
    expect(backwards.status).toBe(400);
    const body = (await backwards.json()) as { error: { code: string; message: string } };
    expect(body.error.code).toBe("invalid_query");
    expect(body.error.message).toMatch(/^Cannot export: /);
    const missing = await eli.fetch("/t/riverline/merge/export?from=2024-05-01%2014:05");
    expect(missing.status).toBe(400);
    expect(((await missing.json()) as { error: { message: string } }).error.message).toMatch(/to/);
    const extra = await eli.fetch(`/t/riverline/merge/export?${new URLSearchParams({ from: formatUtcMinute(from), to: formatUtcMinute(to), tenant: "elsewhere" })}`);
    expect(extra.status).toBe(400);

    const vera = await signIn(t.url, "vera-viewer");
    expect((await vera.fetch(`/t/riverline/merge/export?${new URLSearchParams({ from: formatUtcMinute(from), to: formatUtcMinute(to) })}`)).status).toBe(403);
  });
});
