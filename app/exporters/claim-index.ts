/**
 * Which claim an exporter's message belongs to.
 *
 * An admin claims an exporter (RFC 7011 §2: the device or probe that sends IPFIX; RFC 3954
 * for NetFlow v9) for one collector of a tenant by its source address or a CIDR (RFC 4632
 * §3.1 for IPv4, RFC 4291 §2.3 for IPv6) and, optionally, its Observation Domain ID (v9:
 * source id). Addresses are 16-byte values with IPv4 stored IPv4-mapped (RFC 4291
 * §2.5.5.2, see app/net/address.ts), so every claim is one byte range [first, last].
 *
 * The most specific claim wins: the longest prefix, then, at the same prefix, a claim naming
 * the message's domain over one that takes every domain. Claims of two tenants never overlap
 * (claims.server.ts refuses that with `overlaps`), so a message feeds at most one tenant.
 *
 * Pure module: no I/O. `resolve` runs once per datagram: the claims sit in one hash map per
 * prefix length (a lookup per distinct length, at most 129), and answers are cached per
 * (address, domain), so a steady stream from known exporters costs one map lookup.
 */
import { PrefixError, formatPrefix, parsePrefix, prefixRange } from "../net/prefix.ts";

/** One claim as stored (table exporter_claims). */
export interface ClaimRow {
  id: number;
  tenantId: number;
  collectorId: number;
  /** Network address, 16 bytes, IPv4-mapped for IPv4. */
  first: Uint8Array;
  /** Highest address of the range, 16 bytes. */
  last: Uint8Array;
  /** Prefix length on the 128-bit scale (an IPv4 /24 is 120). */
  prefixLength: number;
  /** Observation Domain ID (IPFIX) or source id (v9); null claims every domain. */
  domainId: number | null;
}

/** Where a message goes: the claim that matched, and the tenant and collector it feeds. */
export interface ClaimTarget {
  claimId: number;
  tenantId: number;
  collectorId: number;
}

/** The part of a claim that `overlaps` compares. */
export type ClaimScope = Pick<ClaimRow, "first" | "last" | "domainId">;

/** The largest Observation Domain ID: an unsigned 32-bit field (RFC 7011 §3.1; RFC 3954 §5.1 source id). */
export const MAX_DOMAIN_ID = 4_294_967_295;

/** Answers cached at most; beyond, the cache starts over (a flood of forged sources cannot grow it). */
const CACHE_LIMIT = 65_536;

interface Level {
  /** Prefix length, 0..128. */
  length: number;
  /** Network (masked address) as a key → the claims on that exact network. */
  networks: Map<string, { anyDomain: ClaimTarget | null; byDomain: Map<number, ClaimTarget> }>;
}

/**
 * The claims of every tenant, ready to answer "which collector does this message feed?".
 * Build a new index when the claims change; an index never changes after construction.
 *
 * @example
 *   const index = new ClaimIndex([{ id: 1, tenantId: 1, collectorId: 7, ...claimRange("192.0.2.0/24"), domainId: null }]);
 *   index.resolve(parseAddress("192.0.2.9"), 0)   // { claimId: 1, tenantId: 1, collectorId: 7 }
 *   index.resolve(parseAddress("198.51.100.1"), 0) // null
 */
export class ClaimIndex {
  /** Longest prefix first. */
  private readonly levels: Level[];
  private readonly cache = new Map<string, ClaimTarget | null>();
  /** Number of claims indexed. */
  readonly size: number;

  constructor(rows: readonly ClaimRow[]) {
    const byLength = new Map<number, Level>();
    // Oldest claim first, so should two equal claims ever both be stored (they are refused),
    // the older one keeps winning and the answer does not depend on the order rows came in.
    const sorted = [...rows].sort((a, b) => a.id - b.id);
    for (const row of sorted) {
      if (!Number.isInteger(row.prefixLength) || row.prefixLength < 0 || row.prefixLength > 128 || row.first.length !== 16) continue;
      let level = byLength.get(row.prefixLength);
      if (!level) byLength.set(row.prefixLength, (level = { length: row.prefixLength, networks: new Map() }));
      const key = networkKey(row.first, row.prefixLength);
      let entry = level.networks.get(key);
      if (!entry) level.networks.set(key, (entry = { anyDomain: null, byDomain: new Map() }));
      const target: ClaimTarget = { claimId: row.id, tenantId: row.tenantId, collectorId: row.collectorId };
      if (row.domainId === null) entry.anyDomain ??= target;
      else if (!entry.byDomain.has(row.domainId)) entry.byDomain.set(row.domainId, target);
    }
    this.levels = [...byLength.values()].sort((a, b) => b.length - a.length);
    this.size = rows.length;
  }

  /**
   * The claim a message from `address` (16 bytes, IPv4-mapped) in observation domain
   * `domain` belongs to, or null when no claim matches (the message feeds nobody). `domain`
   * -1 (a message too short to carry one) matches only claims of every domain. The same
   * object is returned for the same claim, so a caller may compare answers with ===.
   */
  resolve(address: Uint8Array, domain: number): ClaimTarget | null {
    if (address.length !== 16) return null;
    const key = cacheKey(address, domain);
    const cached = this.cache.get(key);
    if (cached !== undefined) return cached;
    const found = this.lookup(address, domain);
    if (this.cache.size >= CACHE_LIMIT) this.cache.clear();
    this.cache.set(key, found);
    return found;
  }

  private lookup(address: Uint8Array, domain: number): ClaimTarget | null {
    for (const level of this.levels) {
      const entry = level.networks.get(networkKey(address, level.length));
      if (!entry) continue;
      // At one prefix length, a claim naming this domain is more specific than one for every domain.
      const named = domain >= 0 ? entry.byDomain.get(domain) : undefined;
      if (named) return named;
      if (entry.anyDomain) return entry.anyDomain;
    }
    return null;
  }
}

/**
 * True when one message could match both claims: their address ranges share an address
 * (RFC 4632 §3.1: two prefixes either nest or are disjoint, so this is "one contains the
 * other") and their domains are compatible (equal, or either claim takes every domain).
 * Claims of two tenants that overlap are refused, so no message can feed two tenants.
 *
 * @example overlaps({ ...claimRange("192.0.2.0/24"), domainId: null }, { ...claimRange("192.0.2.7"), domainId: 3 })  // true
 * @example overlaps({ ...claimRange("192.0.2.0/24"), domainId: 1 }, { ...claimRange("192.0.2.0/24"), domainId: 2 })     // false
 * @example overlaps({ ...claimRange("192.0.2.0/25"), domainId: null }, { ...claimRange("192.0.2.128/25"), domainId: null }) // false
 */
export function overlaps(a: ClaimScope, b: ClaimScope): boolean {
  const domains = a.domainId === null || b.domainId === null || a.domainId === b.domainId;
  return domains && compareBytes(a.first, b.last) <= 0 && compareBytes(b.first, a.last) <= 0;
}

/** A claim's address range, from an address or CIDR as a person types it. */
export interface ClaimRange {
  /** Normalised CIDR text: dotted IPv4 with its /n on the 32-bit scale, RFC 5952 IPv6 (e.g. 192.0.2.1/32, 2001:db8::/48). */
  cidr: string;
  first: Uint8Array;
  last: Uint8Array;
  /** On the 128-bit scale. */
  prefixLength: number;
}

/**
 * Parses an address or a CIDR into a claim's range: a bare address is a /32 (IPv4) or /128
 * (IPv6); a CIDR must be a network address (RFC 4632 §3.1), and text with host bits set is
 * refused with the network suggested. IPv4-mapped IPv6 text (::ffff:192.0.2.1) is the same
 * claim as the dotted address (RFC 4291 §2.5.5.2). Throws PrefixError with a message for people.
 *
 * @example claimRange("192.0.2.1").cidr           // "192.0.2.1/32"
 * @example claimRange("2001:DB8::/32").cidr       // "2001:db8::/32"
 * @example claimRange("192.0.2.1/24")             // throws "192.0.2.1/24 has host bits set; did you mean 192.0.2.0/24?"
 */
export function claimRange(text: string): ClaimRange {
  const trimmed = typeof text === "string" ? text.trim() : text;
  if (trimmed === "") throw new PrefixError("an address or CIDR is required, e.g. 192.0.2.1 or 198.51.100.0/24");
  const prefix = parsePrefix(trimmed);
  const { low, high } = prefixRange(prefix);
  return { cidr: formatPrefix(prefix), first: low, last: high, prefixLength: prefix.length };
}

function compareBytes(a: Uint8Array, b: Uint8Array): number {
  for (let i = 0; i < 16; i++) {
    const d = a[i] - b[i];
    if (d !== 0) return d;
  }
  return 0;
}

/** The first `length` bits of `bytes` as a short string key (the rest cleared). */
function networkKey(bytes: Uint8Array, length: number): string {
  let key = "";
  const whole = length >> 3;
  for (let i = 0; i < whole; i++) key += String.fromCharCode(bytes[i]);
  const rest = length & 7;
  if (rest > 0) key += String.fromCharCode(bytes[whole] & (0xff << (8 - rest)) & 0xff);
  return key;
}

/** The 16 address bytes as 8 UTF-16 units, then the domain as two units (or one marker for "none"). */
function cacheKey(a: Uint8Array, domain: number): string {
  const head = String.fromCharCode(
    (a[0] << 8) | a[1],
    (a[2] << 8) | a[3],
    (a[4] << 8) | a[5],
    (a[6] << 8) | a[7],
    (a[8] << 8) | a[9],
    (a[10] << 8) | a[11],
    (a[12] << 8) | a[13],
    (a[14] << 8) | a[15],
  );
  if (!Number.isInteger(domain) || domain < 0 || domain > MAX_DOMAIN_ID) return `${head}-`;
  return head + String.fromCharCode(domain >>> 16, domain & 0xffff);
}
