import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { ensureUserByEmail, setMembership } from "~/auth/users.server";
import { FILTER_FIELDS, QUERY_FIELDS } from "~/query/fields";
import { parseSliceParams, sliceSearch } from "~/slice/query-state";
import { postFlows, startTestServer, tenantWithKey, type TestServer } from "../helpers/server";
import { signIn, type SignedIn } from "../helpers/session";

// The Slice form's inputs come from the field table (app/query/fields.ts): the AS number and
// interface filters appear with their labels and hints, a link that names them fills them in,
// and the page's own link for the question gives back the same question. Documentation AS
// numbers (RFC 5398) and ifIndex values (RFC 2863).

const decode = (html: string) => html.replace(/&quot;/g, '"').replace(/&#x27;/g, "'").replace(/&amp;/g, "&").replace(/&lt;/g, "<").replace(/&gt;/g, ">");

describe("Slice: AS number and interface inputs", () => {
  let t: TestServer;
  let viewer: SignedIn;

  beforeAll(async () => {
    t = await startTestServer();
    const riverline = await tenantWithKey(t.server, "riverline");
    await setMembership(t.server.db, (await ensureUserByEmail(t.server.db, "vera@example.com")).id, riverline.tenant.id, "viewer");
    // The form shows once the tenant has records: one, an hour ago, with every new field.
    const record = { src: "198.51.100.7", dst: "203.0.113.9", proto: 6, dport: 443, bytes: 1500, packets: 2, start: Date.now() - 3_600_000 };
    const sent = await postFlows(t.url, riverline.key, JSON.stringify([{ ...record, bgpSourceAsNumber: 64496, bgpDestinationAsNumber: 65551, ingressInterface: 3, egressInterface: 10 }]));
    expect(sent.status, await sent.clone().text()).toBe(200);
    viewer = await signIn(t.url, "vera-viewer");
  });
  afterAll(() => t?.close());

  const page = async (search: string) => {
    const res = await viewer.fetch(`/t/riverline/slice${search}`);
    expect(res.status).toBe(200);
    return decode(await res.text());
  };

  it("renders an input for every field the table gives one, with its label, placeholder and hint", async () => {
    const html = await page("");
    for (const field of QUERY_FIELDS) {
      if (!("input" in field)) continue;
      expect(html, field.name).toContain(`>${field.input.label}</label>`);
      expect(html, field.name).toContain(`placeholder="${field.input.placeholder}"`);
      if ("hint" in field.input) expect(html, field.name).toContain(field.input.hint);
    }
    expect(html).toContain("AS numbers and interfaces");
    // The group-by list offers the new keys under their headings.
    for (const [key, label] of [["srcAs", "Source AS"], ["dstAs", "Destination AS"], ["inIf", "Input interface"], ["outIf", "Output interface"]]) {
      expect(html).toMatch(new RegExp(`<option value="${key}"[^>]*>${label}</option>`));
    }
  });

  it("fills the inputs from a link and keeps the group-by it names", async () => {
    const html = await page("?srcAs=64496-64511,65536&dstAs=65551&inIf=3&outIf=10-12&groupBy=dstAs");
    for (const chip of ["64496-64511", "65536", "65551", "10-12"]) expect(html).toContain(`aria-label="Remove ${chip} from`);
    expect(html).toContain('aria-label="Remove 3 from Input interfaces"');
    expect(html).toMatch(/<option value="dstAs" selected="">Destination AS<\/option>/);
    expect(html).not.toContain("Parts of this link were set aside");
  });

  it("marks an item of a hand-edited link that the API would refuse, with the API's reason (RFC 6793: AS numbers end at 2^32 − 1)", async () => {
    const html = await page("?srcAs=4294967296");
    expect(html).toContain('title="An AS number is 0–4294967295, or a range such as "64496-64511". AS numbers stop at 4294967295 (4-octet AS numbers, RFC 6793)."');
  });

  it("the page's link for a question gives back the same question", () => {
    const parsed = parseSliceParams(new URLSearchParams("srcAs=64496,64500-64511&dstAs=65536-65551&inIf=1-48&outIf=49&groupBy=outIf&range=6h"));
    expect(parsed.problems).toEqual([]);
    expect(sliceSearch(parsed.state)).toBe("?range=6h&srcAs=64496,64500-64511&dstAs=65536-65551&inIf=1-48&outIf=49&groupBy=outIf");
    const again = parseSliceParams(new URL(`https://weir.example/t/riverline/slice${sliceSearch(parsed.state)}`).searchParams);
    expect(again.state).toEqual(parsed.state);
    // Every filter of the table is a parameter of the page.
    for (const field of FILTER_FIELDS) expect(parseSliceParams(new URLSearchParams(`${field.name}=1`)).problems, field.name).toEqual([]);
  });
});
