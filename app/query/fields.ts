/**
 * The query fields, each defined once: what a filter takes (the zod schema of its items, for
 * `POST /api/v1/estimate` and the query string alike), which kept column it reads, whether and
 * how it groups, the Slice console's input for it, and its line in docs/query-fields.md. The
 * request schema (request.ts), the columns (columns.ts), the scan (scan.ts), the page URL
 * (slice/query-state.ts), the form and the docs all read this table, so a new field whose
 * value is stored is one entry here.
 *
 * Matching rules, the same for every field: items of one list are alternatives (OR), different
 * fields must all hold (AND), an exclude field drops what it matches. A record without a value
 * for an optional field (no AS number, no interface: the exporter did not send it) is matched
 * by no list of that field, and groups under the key "none".
 *
 * Pure module: no I/O, usable in the browser and on the server.
 */
import { z } from "zod";
import { parsePrefix, type Prefix } from "../net/prefix.ts";

/** An inclusive range of whole numbers (ports, AS numbers, interface indexes). */
export interface NumberRange {
  low: number;
  high: number;
}

function refuse(ctx: z.RefinementCtx, input: unknown, message: string): never {
  ctx.issues.push({ code: "custom", message, input, path: [] });
  return z.NEVER;
}

// ---- item schemas ------------------------------------------------------------------------------

const cidr = z.unknown().transform((value, ctx): Prefix => {
  if (typeof value !== "string") return refuse(ctx, value, "must be CIDR text such as 198.51.100.0/24 or 2001:db8::/32");
  try {
    return parsePrefix(value);
  } catch (error) {
    return refuse(ctx, value, (error as Error).message);
  }
});

/**
 * One whole number or an inclusive range "low-high" of them, up to `max`: the form of ports,
 * AS numbers and interface indexes. `noun` names one value in messages, `limit` says where the
 * values stop and why.
 */
function numberRange(noun: string, max: number, example: string, limit: string) {
  const form = `must be ${noun} 0–${max} or a range such as "${example}"`;
  return z.unknown().transform((value, ctx): NumberRange => {
    if (typeof value === "number") {
      if (Number.isInteger(value) && value < 0) return refuse(ctx, value, `is negative; ${form}`);
      if (Number.isInteger(value) && value > max) return refuse(ctx, value, `${form}; ${limit}`);
      return Number.isInteger(value) ? { low: value, high: value } : refuse(ctx, value, form);
    }
    if (typeof value !== "string") return refuse(ctx, value, form);
    if (/^-\d+$/.test(value)) return refuse(ctx, value, `is negative; ${form}`);
    const m = /^(\d+)(?:-(\d+))?$/.exec(value);
    if (!m) return refuse(ctx, value, form);
    const low = Number(m[1]);
    const high = m[2] === undefined ? low : Number(m[2]);
    if (low > max || high > max) return refuse(ctx, value, `${form}; ${limit}`);
    if (low > high) return refuse(ctx, value, `is a range that ends before it starts; did you mean "${high}-${low}"?`);
    return { low, high };
  });
}

/** The largest unsigned32 (RFC 7012 §3.1.3): 4-octet AS numbers (RFC 6793) and interface indexes as IPFIX carries them. */
export const UNSIGNED32_MAX = 4_294_967_295;

// A port message keeps the words the API has always used ("a port 0–65535").
const portRange = numberRange("a port", 65535, "1024-65535", "ports stop at 65535 (RFC 7012 unsigned16)");

const protocol = z.int({ error: "must be an IP protocol number from 0 to 255 (IANA registry; 6 = TCP, 17 = UDP)" }).min(0).max(255);

const collectorName = z
  .string({ error: "must be a collector name" })
  .min(1, { error: "must be a collector name, not empty" })
  .max(64, { error: "must be a collector name of at most 64 characters" });

/**
 * What a filter's items are. `items` names a list of them in messages; `numbers` says that a
 * query string's digits go to the schema as numbers (protocols are numbers only).
 */
export const VALUE_KINDS = {
  prefix: { item: cidr, items: "CIDR prefixes", numbers: false },
  port: { item: portRange, items: "ports or port ranges", numbers: false },
  protocol: { item: protocol, items: "IP protocol numbers", numbers: true },
  asn: {
    item: numberRange("an AS number", UNSIGNED32_MAX, "64496-64511", "AS numbers stop at 4294967295 (4-octet AS numbers, RFC 6793)"),
    items: "AS numbers or ranges",
    numbers: false,
  },
  ifIndex: {
    item: numberRange("an interface index", UNSIGNED32_MAX, "1-48", "interface indexes stop at 4294967295 (RFC 7012 unsigned32)"),
    items: "interface indexes or ranges",
    numbers: false,
  },
  collector: { item: collectorName, items: "collector names", numbers: false },
} as const;
export type ValueKind = keyof typeof VALUE_KINDS;
export type ValueOf<K extends ValueKind> = z.output<(typeof VALUE_KINDS)[K]["item"]>;

/**
 * Where a field's value lives: an address column, a small whole-number column (its values
 * index a lookup table), an optional unsigned32 column named after the FlowRecord property it
 * is read from, or the reservoir itself (collector, window).
 */
export const ADDRESS_COLUMNS = ["src", "dst"] as const;
export const SMALL_COLUMNS = { sport: 65536, dport: 65536, proto: 256 } as const;
/** Optional unsigned32 columns: the FlowRecord properties they are read from (flow/record.ts), stored in every kept row (ingest/kept-codec.ts). */
export const NUMBER_COLUMNS = ["srcAs", "dstAs", "ingressInterface", "egressInterface"] as const;
export type AddressColumn = (typeof ADDRESS_COLUMNS)[number];
export type SmallColumn = keyof typeof SMALL_COLUMNS;
export type NumberColumn = (typeof NUMBER_COLUMNS)[number];
export type FieldColumn = AddressColumn | SmallColumn | NumberColumn | "collector" | "window";

/** Where a field's input stands in the Slice form. */
export const INPUT_SECTIONS = { source: "Source", destination: "Destination", ports: "Ports and protocols", routing: "AS numbers and interfaces" } as const;
export type InputSection = keyof typeof INPUT_SECTIONS;

export interface QueryField {
  /** The filter's name (JSON `where` key, query-string and page-URL parameter); for a group-by-only field, its key. */
  name: string;
  /** What the filter's items are; null: group-by only. */
  value: ValueKind | null;
  column: FieldColumn;
  /** Drops the records it matches instead of keeping them. */
  exclude?: boolean;
  /**
   * `groupBy` key and heading; absent: not a group-by. `none`: how the console shows the group
   * of records without the value (an optional field; the API's key is "none").
   */
  groupBy?: { key: string; label: string; none?: string };
  /** The docs table's line: what it matches, in plain words. */
  doc: string;
  /**
   * The Slice form's chip input (the placeholder says what to type in words, so it never reads
   * as a value); absent: the form has a control of its own (protocols, collectors) or none.
   */
  input?: { section: InputSection; label: string; placeholder: string; hint?: string };
  /** Where the form asks for a field with a control of its own, for the docs. */
  formControl?: string;
}

/**
 * Every query field, in the order of the API's lists, the page URL and the docs. The AS and
 * interface examples are documentation AS numbers (RFC 5398) and ifIndex values (RFC 2863).
 */
export const QUERY_FIELDS = [
  {
    name: "src",
    value: "prefix",
    column: "src",
    groupBy: { key: "src", label: "Source prefix" },
    doc: "source address in any of these CIDR prefixes (IPv4 or IPv6; a bare address is a /32 or /128); grouped by `prefixLength`",
    input: { section: "source", label: "Source in", placeholder: "add a CIDR, e.g. 198.51.100.0/24" },
  },
  {
    name: "dst",
    value: "prefix",
    column: "dst",
    groupBy: { key: "dst", label: "Destination prefix" },
    doc: "destination address in any of these CIDR prefixes; grouped by `prefixLength`",
    input: { section: "destination", label: "Destination in", placeholder: "add a CIDR, e.g. 203.0.113.0/24" },
  },
  {
    name: "srcExclude",
    value: "prefix",
    column: "src",
    exclude: true,
    doc: "source address in none of these CIDR prefixes",
    input: { section: "source", label: "Source not in", placeholder: "add a CIDR, e.g. 2001:db8:ff::/48" },
  },
  {
    name: "dstExclude",
    value: "prefix",
    column: "dst",
    exclude: true,
    doc: "destination address in none of these CIDR prefixes",
    input: { section: "destination", label: "Destination not in", placeholder: "add a CIDR, e.g. 192.0.2.0/25" },
  },
  {
    name: "sport",
    value: "port",
    column: "sport",
    groupBy: { key: "sport", label: "Source port" },
    doc: "source transport port (`sourceTransportPort`) equal to one of these ports or in one of these ranges",
    input: { section: "ports", label: "Source ports", placeholder: "add a port or range, e.g. 1024-65535" },
  },
  {
    name: "dport",
    value: "port",
    column: "dport",
    groupBy: { key: "dport", label: "Destination port" },
    doc: "destination transport port (`destinationTransportPort`) equal to one of these ports or in one of these ranges",
    input: { section: "ports", label: "Destination ports", placeholder: "add a port or range, e.g. 443" },
  },
  {
    name: "proto",
    value: "protocol",
    column: "proto",
    groupBy: { key: "proto", label: "Protocol" },
    doc: "IP protocol number (`protocolIdentifier`, IANA registry: 6 TCP, 17 UDP) one of these",
    formControl: "Ports and protocols: Protocols (common ones as checkboxes, others by number)",
  },
  {
    name: "srcAs",
    value: "asn",
    column: "srcAs",
    groupBy: { key: "srcAs", label: "Source AS", none: "none (no source AS sent)" },
    doc: "source AS number (`bgpSourceAsNumber`) equal to one of these or in one of these ranges; a record without one never matches",
    input: {
      section: "routing",
      label: "Source AS numbers",
      placeholder: "add an AS or range, e.g. 64496-64511",
      hint: "AS numbers 0–4294967295 (RFC 6793), or ranges. Records without a source AS never match.",
    },
  },
  {
    name: "dstAs",
    value: "asn",
    column: "dstAs",
    groupBy: { key: "dstAs", label: "Destination AS", none: "none (no destination AS sent)" },
    doc: "destination AS number (`bgpDestinationAsNumber`), as for `srcAs`",
    input: {
      section: "routing",
      label: "Destination AS numbers",
      placeholder: "add an AS or range, e.g. 65536-65551",
      hint: "AS numbers 0–4294967295 (RFC 6793), or ranges. Records without a destination AS never match.",
    },
  },
  {
    name: "inIf",
    value: "ifIndex",
    column: "ingressInterface",
    groupBy: { key: "inIf", label: "Input interface", none: "none (no input interface sent)" },
    doc: "input interface index (`ingressInterface`, an ifIndex of RFC 2863) equal to one of these or in one of these ranges; a record without one never matches",
    input: {
      section: "routing",
      label: "Input interfaces",
      placeholder: "add an interface index or range, e.g. 1-48",
      hint: "Interface indexes (ifIndex, RFC 2863) as the exporter numbers them, or ranges. Records without one never match.",
    },
  },
  {
    name: "outIf",
    value: "ifIndex",
    column: "egressInterface",
    groupBy: { key: "outIf", label: "Output interface", none: "none (no output interface sent)" },
    doc: "output interface index (`egressInterface`), as for `inIf`",
    input: {
      section: "routing",
      label: "Output interfaces",
      placeholder: "add an interface index or range, e.g. 49",
      hint: "Interface indexes (ifIndex, RFC 2863) as the exporter numbers them, or ranges. Records without one never match.",
    },
  },
  {
    name: "collectors",
    value: "collector",
    column: "collector",
    groupBy: { key: "collector", label: "Collector" },
    doc: "collector one of these names; none given: every stream collector (merges and copies count only when named)",
    formControl: "Collectors (checkboxes)",
  },
  {
    name: "window",
    value: null,
    column: "window",
    groupBy: { key: "window", label: "Window start (UTC)" },
    doc: "group-by only: the start of each window, ISO 8601 in UTC",
  },
] as const satisfies readonly QueryField[];

type Fields = (typeof QUERY_FIELDS)[number];
type FilterFields = Extract<Fields, { value: ValueKind }>;
export type FilterName = FilterFields["name"];
export type GroupByKind = Extract<Fields, { groupBy: unknown }>["groupBy"]["key"];

/** A validated `where`: every filter's items, empty when not given. */
export type WhereFilters = { [F in FilterFields as F["name"]]: ValueOf<F["value"]>[] };

/** An item as a JSON request may write it. */
interface JsonItems {
  prefix: string;
  port: number | string;
  protocol: number;
  asn: number | string;
  ifIndex: number | string;
  collector: string;
}
/** `where` as sent in JSON: each filter a list, or one bare item standing for a list of one. */
export type WhereRequest = { [F in FilterFields as F["name"]]?: JsonItems[F["value"]] | JsonItems[F["value"]][] };

/** The filters, in table order. */
export const FILTER_FIELDS = QUERY_FIELDS.filter((f): f is FilterFields => f.value !== null);
export const FILTER_NAMES = FILTER_FIELDS.map((f) => f.name) as FilterName[];

/** Every `groupBy` key, in table order. */
export const GROUP_BY = QUERY_FIELDS.flatMap((f) => ("groupBy" in f ? [f.groupBy.key] : [])) as unknown as readonly [GroupByKind, ...GroupByKind[]];

/** What each group-by kind is called in the form and in result headings. */
export const GROUP_LABELS = Object.fromEntries(QUERY_FIELDS.flatMap((f) => ("groupBy" in f ? [[f.groupBy.key, f.groupBy.label]] : []))) as Record<
  GroupByKind,
  string
>;

/** The field behind a group-by key. */
export function groupField(key: GroupByKind): QueryField {
  return QUERY_FIELDS.find((f) => "groupBy" in f && f.groupBy.key === key)!;
}

/** The group key of records that lack an optional field's value. */
export const NO_VALUE_KEY = "none";

// ---- the docs table ----------------------------------------------------------------------------

const KIND_DOC: Record<ValueKind, string> = {
  prefix: "CIDR prefixes",
  port: "ports 0–65535 or ranges `low-high`",
  protocol: "numbers 0–255",
  asn: "AS numbers 0–4294967295 or ranges `low-high`",
  ifIndex: "interface indexes 0–4294967295 or ranges `low-high`",
  collector: "collector names",
};

/**
 * docs/query-fields.md as this table gives it (a test checks the file equals it; write it
 * with `npx tsx scripts/docs-query-fields.ts`).
 */
export function queryFieldsMarkdown(): string {
  const cell = (text: string) => text.replace(/\|/g, "\\|");
  const lines = [
    "# Estimate query fields",
    "",
    "<!-- Generated from app/query/fields.ts by scripts/docs-query-fields.ts; edit the table there, not this file. -->",
    "",
    "Filters go under `where` in a JSON request to `POST /api/v1/estimate` and at the top level of the query string of",
    "`GET /api/v1/estimate` (and of a Slice page link). Every filter takes a list: a JSON array or one bare value, or in a",
    "query string items separated by commas (`srcAs=64496,64500-64511`). Items of one list are alternatives, different",
    "filters must all hold, an exclude filter drops what it matches. A record without a value for an optional field (an",
    "exporter that sent no AS number or interface) is matched by no list of that field and groups under the key",
    `\`${NO_VALUE_KEY}\`.`,
    "",
    "| field | items | matches | `groupBy` | Slice form |",
    "|---|---|---|---|---|",
  ];
  for (const f of QUERY_FIELDS as readonly QueryField[]) {
    const items = f.value === null ? "—" : KIND_DOC[f.value];
    const group = f.groupBy ? `\`${f.groupBy.key}\` (${f.groupBy.label})` : "—";
    const input = f.input ? `${INPUT_SECTIONS[f.input.section]}: ${f.input.label}` : (f.formControl ?? "—");
    lines.push(`| \`${f.name}\` | ${cell(items)} | ${cell(f.doc)} | ${cell(group)} | ${cell(input)} |`);
  }
  lines.push("");
  return lines.join("\n");
}
