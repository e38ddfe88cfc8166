import { describe, expect, it } from "vitest";
import { parsePrefix } from "~/net/prefix";
import { MAX_LIST_ITEMS, parseEstimateRequest, parseEstimateSearchParams, type ParsedQuery } from "~/query/request";

const DAY = { from: "2024-05-01T00:00:00Z", to: "2024-05-02T00:00:00Z" };
const FROM_MS = Date.UTC(2024, 4, 1);
const TO_MS = Date.UTC(2024, 4, 2);

function ok(parsed: ParsedQuery) {
  if (!parsed.ok) throw new Error(`expected a valid query, got ${parsed.message}`);
  return parsed.query;
}

function issues(parsed: ParsedQuery) {
  if (parsed.ok) throw new Error("expected an invalid query");
  return parsed.details;
}

const get = (query: string) => parseEstimateSearchParams(new URLSearchParams(query));

describe("a valid request", () => {
  it("parses every field of the JSON form", () => {
    const query = ok(
      parseEstimateRequest({
        from: "2024-05-01T02:00:00Z",
        to: "2024-05-01T04:40:00.250+02:00", // RFC 3339 §5.6 offset: 02:40:00.250Z
        where: {
          src: ["198.51.100.0/25", "2001:db8::/32"],
          dst: ["203.0.113.9"], // a bare address is a /32 (RFC 4632 §3.1)
          srcExclude: ["198.51.100.64/26"],
          dstExclude: ["2001:db8::1"], // and an IPv6 one a /128 (RFC 4291 §2.3)
          sport: [53, "1024-65535"],
          dport: ["443"],
          proto: [6, 17],
          srcAs: [64496, "64500-64511"], // documentation AS numbers (RFC 5398)
          dstAs: ["65536-65551"],
          inIf: [3],
          outIf: ["10-12"],
          collectors: ["edge-1"],
        },
        metric: "packets",
        groupBy: "src",
        prefixLength: { ipv4: 16, ipv6: 48 },
        top: 25,
        rank: "split",
      }),
    );
    expect(query).toEqual({
      from: Date.UTC(2024, 4, 1, 2),
      to: Date.UTC(2024, 4, 1, 2, 40, 0, 250),
      where: {
        src: [parsePrefix("198.51.100.0/25"), parsePrefix("2001:db8::/32")],
        dst: [parsePrefix("203.0.113.9/32")],
        srcExclude: [parsePrefix("198.51.100.64/26")],
        dstExclude: [parsePrefix("2001:db8::1/128")],
        sport: [{ low: 53, high: 53 }, { low: 1024, high: 65535 }],
        dport: [{ low: 443, high: 443 }],
        proto: [6, 17],
        srcAs: [{ low: 64496, high: 64496 }, { low: 64500, high: 64511 }],
        dstAs: [{ low: 65536, high: 65551 }],
        inIf: [{ low: 3, high: 3 }],
        outIf: [{ low: 10, high: 12 }],
        collectors: ["edge-1"],
      },
      metric: "packets",
      groupBy: { by: "src", prefixLength: { ipv4: 16, ipv6: 48 } },
      top: 25,
      rank: "split",
      allowOverlap: false,
      unit: "total",
    });
  });

  it("fills the defaults: no filters, the tenant's metric, top 10, /24 and /64 groups", () => {
    expect(ok(parseEstimateRequest({ from: FROM_MS, to: TO_MS }))).toEqual({
      from: FROM_MS,
      to: TO_MS,
      where: { src: [], dst: [], srcExclude: [], dstExclude: [], sport: [], dport: [], proto: [], srcAs: [], dstAs: [], inIf: [], outIf: [], collectors: [] },
      metric: null,
      groupBy: null,
      top: 10,
      rank: "estimate",
      allowOverlap: false,
      unit: "total",
    });
    // /24 per IPv4 network and /64 per IPv6 subnet (RFC 4291 §2.5.4: 64-bit interface ids).
    expect(ok(parseEstimateRequest({ ...DAY, groupBy: "dst" })).groupBy).toEqual({ by: "dst", prefixLength: { ipv4: 24, ipv6: 64 } });
    expect(ok(parseEstimateRequest({ ...DAY, groupBy: "dst", prefixLength: { ipv6: 56 } })).groupBy).toEqual({ by: "dst", prefixLength: { ipv4: 24, ipv6: 56 } });
    expect(ok(parseEstimateRequest({ ...DAY, groupBy: "src", prefixLength: 20 })).groupBy).toEqual({ by: "src", prefixLength: { ipv4: 20, ipv6: 20 } });
    expect(ok(parseEstimateRequest({ ...DAY, groupBy: "window" })).groupBy).toEqual({ by: "window" });
  });

  it("takes a single value where a list is expected", () => {
    const single = ok(parseEstimateRequest({ ...DAY, where: { src: "198.51.100.0/24", dport: 443, proto: 6, collectors: "edge-1" } }));
    const lists = ok(parseEstimateRequest({ ...DAY, where: { src: ["198.51.100.0/24"], dport: [443], proto: [6], collectors: ["edge-1"] } }));
    expect(single).toEqual(lists);
  });

  it("reads times as RFC 3339 date-time, a bare date (UTC midnight) or epoch ms (RFC 3339 §5.6; app/time/rfc3339.ts)", () => {
    const range = (from: unknown, to: unknown) => {
      const q = ok(parseEstimateRequest({ from, to }));
      return [q.from, q.to];
    };
    expect(range("2024-05-01", "2024-05-02")).toEqual([FROM_MS, TO_MS]);
    expect(range(FROM_MS, String(TO_MS))).toEqual([FROM_MS, TO_MS]);
    expect(range("2024-05-01T00:00:00z", "2024-05-01T23:00:00-01:00")).toEqual([FROM_MS, TO_MS]);
    // The NOTE of §5.6: a space may stand for "T"; a leap second (§5.7) is kept as 23:59:59.999Z.
    expect(range("2024-05-01 00:00:00Z", "2024-05-01T00:00:00.5Z")).toEqual([FROM_MS, FROM_MS + 500]);
    expect(range("2016-12-31T23:59:60Z", "2017-01-01")).toEqual([Date.UTC(2016, 11, 31, 23, 59, 59, 999), Date.UTC(2017, 0, 1)]);
  });
});

describe("the query-string form", () => {
  it.each([
    [
      "filters at the top level, lists comma-separated",
      "from=2024-05-01T00:00:00Z&to=2024-05-02T00:00:00Z&src=198.51.100.0/24,2001:db8::/32&dport=443,1024-65535&proto=6,17&collectors=edge-1",
      { ...DAY, where: { src: ["198.51.100.0/24", "2001:db8::/32"], dport: [443, "1024-65535"], proto: [6, 17], collectors: ["edge-1"] } },
    ],
    [
      "lists as repeated parameters",
      `from=${FROM_MS}&to=${TO_MS}&src=198.51.100.0/24&src=2001:db8::/32&srcExclude=198.51.100.128/25&sport=53&sport=123`,
      { from: FROM_MS, to: TO_MS, where: { src: ["198.51.100.0/24", "2001:db8::/32"], srcExclude: ["198.51.100.128/25"], sport: [53, 123] } },
    ],
    [
      "metric, group-by, prefix lengths per family and top",
      "from=2024-05-01&to=2024-05-02&metric=flows&groupBy=dst&prefixLength=ipv4:16,ipv6:48&top=5&dstExclude=2001:db8::1",
      { from: "2024-05-01", to: "2024-05-02", metric: "flows", groupBy: "dst", prefixLength: { ipv4: 16, ipv6: 48 }, top: 5, where: { dstExclude: ["2001:db8::1"] } },
    ],
    [
      "one prefix length for both families",
      "from=2024-05-01&to=2024-05-02&groupBy=src&prefixLength=20",
      { from: "2024-05-01", to: "2024-05-02", groupBy: "src", prefixLength: 20 },
    ],
  ] as const)("agrees with the JSON form: %s", (_, query, json) => {
    expect(ok(get(query))).toEqual(ok(parseEstimateRequest(json)));
  });

  it("names the parameter as written, without where", () => {
    expect(issues(get("from=2024-05-01&to=2024-05-02&src=198.51.100.0/24,198.51.100.7/24"))).toEqual([
      { path: "src[1]", message: "198.51.100.7/24 has host bits set; did you mean 198.51.100.0/24?" },
    ]);
  });

  it.each([
    ["from=2024-05-01&from=2024-05-02&to=2024-05-03", "from", /given 2 times/],
    ["from=2024-05-01&to=2024-05-02&dport=443,,80", "dport[1]", /empty/],
    ["from=2024-05-01&to=2024-05-02&where=src", "where", /not a known parameter.*src, dst/],
    ["from=2024-05-01&to=2024-05-02&proto=tcp", "proto[0]", /IP protocol number from 0 to 255/],
    ["from=2024-05-01&to=2024-05-02&top=ten", "top", /whole number from 1 to 1000/],
    ["from=2024-05-01&to=2024-05-02&groupBy=src&prefixLength=ipv5:3", "prefixLength", /prefixLength=ipv4:24,ipv6:48/],
  ])("refuses %s at %s", (query, path, message) => {
    const details = issues(get(query));
    expect(details.find((d) => d.path === path)?.message).toMatch(message);
  });
});

describe("an invalid request is refused with the field and the reason", () => {
  it.each([
    // [body, path, message]
    [{ to: DAY.to }, "from", /is required/],
    [{ from: DAY.from }, "to", /is required/],
    [{ from: DAY.to, to: DAY.from }, "to", /must be after from \(2024-05-02T00:00:00\.000Z\)/],
    [{ from: FROM_MS, to: FROM_MS }, "to", /must be after from/],
    [{ from: "2023-01-01", to: "2024-05-02" }, "to", /spans 487 days; one query covers at most 400 days/],
    [{ from: "2024-05-01T00:00:00", to: DAY.to }, "from", /needs an offset/], // RFC 3339 §5.6: an offset is required
    [{ from: "2024-05-01T00:00Z", to: DAY.to }, "from", /needs seconds/], // RFC 3339 §5.6 partial-time: seconds are required
    [{ from: "2024-05-01T00:00:00,5Z", to: DAY.to }, "from", /after "\."/], // RFC 3339 §5.6 time-secfrac: "." only
    [{ from: "yesterday", to: DAY.to }, "from", /RFC 3339 .* or epoch milliseconds/],
    [{ from: "2024-02-30", to: DAY.to }, "from", /not a real date/], // no 30 February
    [{ from: -5, to: DAY.to }, "from", /non-negative whole number/],
    [{ from: 1.5, to: DAY.to }, "from", /non-negative whole number/],
    [{ from: "1969-12-31T23:59:59Z", to: DAY.to }, "from", /before 1970-01-01/], // epoch ms are non-negative
    [{ from: "1970-01-01T00:30:00+01:00", to: DAY.to }, "from", /before 1970-01-01/],
    [{ from: true, to: DAY.to }, "from", /RFC 3339/],
    // ISO 8601 years have four digits; ECMA-262 TimeClip ends dates at 8.64e15 ms: later is refused, not a crash.
    [{ from: "8700000000000000", to: "8700000000000001" }, "from", /must be before 10000-01-01T00:00:00Z/],
    [{ from: DAY.from, to: Date.UTC(10000, 0, 1) }, "to", /must be before 10000-01-01T00:00:00Z/],
    [{ ...DAY, where: { src: ["198.51.100.7/24"] } }, "where.src[0]", /^198\.51\.100\.7\/24 has host bits set; did you mean 198\.51\.100\.0\/24\?$/], // RFC 4632 §3.1
    [{ ...DAY, where: { dst: ["2001:db8::1/32"] } }, "where.dst[0]", /did you mean 2001:db8::\/32\?/],
    [{ ...DAY, where: { srcExclude: ["198.51.100.0/33"] } }, "where.srcExclude[0]", /prefix length must be from 0 to 32/],
    [{ ...DAY, where: { dstExclude: ["2001:db8::/129"] } }, "where.dstExclude[0]", /from 0 to 128/],
    [{ ...DAY, where: { src: ["256.0.0.0/8"] } }, "where.src[0]", /over 255/],
    [{ ...DAY, where: { src: [24] } }, "where.src[0]", /CIDR text/],
    [{ ...DAY, where: { sport: [65536] } }, "where.sport[0]", /port 0–65535/],
    [{ ...DAY, where: { sport: ["70000"] } }, "where.sport[0]", /ports stop at 65535/],
    [{ ...DAY, where: { dport: ["2000-1000"] } }, "where.dport[0]", /ends before it starts; did you mean "1000-2000"\?/],
    [{ ...DAY, where: { dport: ["https"] } }, "where.dport[0]", /port 0–65535 or a range/],
    [{ ...DAY, where: { dport: [443.5] } }, "where.dport[0]", /port 0–65535/],
    [{ ...DAY, where: { proto: [256] } }, "where.proto[0]", /0 to 255/],
    [{ ...DAY, where: { proto: ["6"] } }, "where.proto[0]", /0 to 255/],
    [{ ...DAY, where: { collectors: [""] } }, "where.collectors[0]", /not empty/],
    [{ ...DAY, where: { collectors: [7] } }, "where.collectors[0]", /collector name/],
    [{ ...DAY, where: { src: { cidr: "198.51.100.0/24" } } }, "where.src", /list of CIDR prefixes/],
    [{ ...DAY, where: { dport: Array(MAX_LIST_ITEMS + 1).fill(443) } }, "where.dport", /at most 256 items/],
    [{ ...DAY, where: { asn: [64496] } }, "where.asn", /not a known filter \(known: src, dst, srcExclude/],
    [{ ...DAY, where: "src=198.51.100.0/24" }, "where", /object of filters/],
    [{ ...DAY, src: ["198.51.100.0/24"] }, "src", /is a filter: put it inside "where"/],
    [{ ...DAY, filter: {} }, "filter", /not a known field \(known: from, to, where, metric, groupBy, prefixLength, top, rank(, allowOverlap)?, unit\)/],
    [{ ...DAY, metric: "octets" }, "metric", /one of bytes, packets, flows/],
    [{ ...DAY, groupBy: "asn" }, "groupBy", /one of src, dst, sport, dport, proto, srcAs, dstAs, inIf, outIf, collector, window/],
    [{ ...DAY, top: 0 }, "top", /from 1 to 1000/],
    [{ ...DAY, top: 1001 }, "top", /from 1 to 1000/],
    [{ ...DAY, top: 2.5 }, "top", /from 1 to 1000/],
    [{ ...DAY, groupBy: "dport", prefixLength: 16 }, "prefixLength", /only with groupBy src or dst/],
    [{ ...DAY, groupBy: "src", prefixLength: 48 }, "prefixLength", /longer than an IPv4 address .* \{ "ipv4": 24, "ipv6": 48 \}/],
    [{ ...DAY, groupBy: "src", prefixLength: { ipv4: 33 } }, "prefixLength.ipv4", /0 to 32/],
    [{ ...DAY, groupBy: "src", prefixLength: { ipv6: 129 } }, "prefixLength.ipv6", /0 to 128/],
    [{ ...DAY, groupBy: "src", prefixLength: { v4: 8 } }, "prefixLength", /v4 is not a family/],
    [[], "", /must be a JSON object/],
    [null, "", /must be a JSON object/],
    ["from=2024-05-01", "", /must be a JSON object/],
  ])("%j → %s", (body, path, message) => {
    const details = issues(parseEstimateRequest(body));
    const detail = details.find((d) => d.path === path);
    expect(detail, `a detail at ${JSON.stringify(path)} in ${JSON.stringify(details)}`).toBeDefined();
    expect(detail!.message).toMatch(message);
  });

  it("reports every problem at once and sums them up in the message", () => {
    const parsed = parseEstimateRequest({ from: "x", to: DAY.to, where: { src: ["198.51.100.7/24"], proto: [300] }, top: 0 });
    expect(parsed.ok).toBe(false);
    if (parsed.ok) return;
    expect(parsed.details.map((d) => d.path)).toEqual(["from", "where.src[0]", "where.proto[0]", "top"]);
    expect(parsed.message).toMatch(/^Invalid query: from: must be RFC 3339 .* \(and 3 more\)\.$/);
  });
});

describe("AS number and interface filters (fields.ts)", () => {
  it("take numbers, digits and ranges, in JSON and in a query string alike", () => {
    // Documentation AS numbers (RFC 5398) and ifIndex values (RFC 2863).
    const json = ok(parseEstimateRequest({ ...DAY, where: { srcAs: 64496, dstAs: ["64500-64511", "65536"], inIf: ["1-48"], outIf: [49, 50] } }));
    const query = ok(get("from=2024-05-01T00:00:00Z&to=2024-05-02T00:00:00Z&srcAs=64496&dstAs=64500-64511,65536&inIf=1-48&outIf=49&outIf=50"));
    expect(query).toEqual(json);
    expect(json.where.dstAs).toEqual([{ low: 64500, high: 64511 }, { low: 65536, high: 65536 }]);
    // 4-octet AS numbers run to 2^32 − 1 (RFC 6793 §1), and so do IPFIX's unsigned32 interface indexes (RFC 7012 §3.1.3).
    expect(ok(parseEstimateRequest({ ...DAY, where: { srcAs: [4294967295], inIf: ["0-4294967295"] } })).where.inIf).toEqual([{ low: 0, high: 4294967295 }]);
  });

  it.each([
    [{ srcAs: [4294967296] }, "where.srcAs[0]", /AS numbers stop at 4294967295 \(4-octet AS numbers, RFC 6793\)/],
    [{ dstAs: ["64496-4294967296"] }, "where.dstAs[0]", /AS numbers stop at 4294967295/],
    [{ srcAs: [-1] }, "where.srcAs[0]", /^is negative; must be an AS number 0–4294967295/],
    [{ srcAs: ["-64496"] }, "where.srcAs[0]", /^is negative/],
    [{ srcAs: ["64511-64496"] }, "where.srcAs[0]", /ends before it starts; did you mean "64496-64511"\?/],
    [{ srcAs: ["AS64496"] }, "where.srcAs[0]", /must be an AS number 0–4294967295 or a range such as "64496-64511"/],
    [{ dstAs: [64496.5] }, "where.dstAs[0]", /must be an AS number/],
    [{ inIf: [4294967296] }, "where.inIf[0]", /interface indexes stop at 4294967295 \(RFC 7012 unsigned32\)/],
    [{ outIf: ["ge-0/0/1"] }, "where.outIf[0]", /must be an interface index 0–4294967295 or a range/],
    [{ outIf: { low: 1 } }, "where.outIf", /list of interface indexes or ranges/],
  ])("%j is refused at %s", (where, path, message) => {
    const details = issues(parseEstimateRequest({ ...DAY, where }));
    expect(details.find((d) => d.path === path)?.message, JSON.stringify(details)).toMatch(message);
  });

  it("names the query-string parameter as written", () => {
    expect(issues(get("from=2024-05-01&to=2024-05-02&srcAs=64496,4294967296"))).toEqual([
      { path: "srcAs[1]", message: 'must be an AS number 0–4294967295 or a range such as "64496-64511"; AS numbers stop at 4294967295 (4-octet AS numbers, RFC 6793)' },
    ]);
  });
});
