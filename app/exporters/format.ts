/**
 * How exporters are named on the console and in the admin CLI. Pure module: no I/O, usable
 * in the browser and on the server.
 */

const TRANSPORTS: Record<string, string> = {
  "ipfix-udp": "IPFIX over UDP",
  "ipfix-tcp": "IPFIX over TCP",
  "netflow9-udp": "NetFlow v9 over UDP",
  "ipfix-file": "IPFIX file",
};

/**
 * @example transportLabel("netflow9-udp") // "NetFlow v9 over UDP"
 * @example transportLabel("sctp")         // "sctp" (shown as stored when unknown)
 */
export function transportLabel(transport: string): string {
  return TRANSPORTS[transport] ?? transport;
}

/**
 * A claim's observation domain: its number, or "every domain" for a claim without one.
 *
 * @example claimDomainLabel(null) // "every domain"
 * @example claimDomainLabel(5)    // "domain 5"
 */
export function claimDomainLabel(domainId: number | null): string {
  return domainId === null ? "every domain" : `domain ${domainId}`;
}

/**
 * An observed exporter's domain: -1 stands for messages too short to carry one.
 *
 * @example observedDomainLabel(0)  // "0"
 * @example observedDomainLabel(-1) // "none (message too short)"
 */
export function observedDomainLabel(domainId: number): string {
  return domainId < 0 ? "none (message too short)" : String(domainId);
}

/**
 * How a claim is named in messages, on the console and in the Ledger.
 *
 * @example describeClaim("192.0.2.1/32", 5)     // "192.0.2.1/32, domain 5"
 * @example describeClaim("192.0.2.0/24", null)  // "192.0.2.0/24, every domain"
 */
export function describeClaim(cidr: string, domainId: number | null): string {
  return `${cidr}, ${claimDomainLabel(domainId)}`;
}
