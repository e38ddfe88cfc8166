/**
 * The demo scenario. INVENTED from start to finish: "Riverline", a fictional regional
 * carrier with two points of presence (collectors `pop-north` and `pop-south`) and a lab
 * collector (`edge-lab`), a handful of fictional customers, and "Tributary", one of those
 * customers, which runs its own Weir tenant for its office gateway (`office-gw`).
 *
 * Only documentation number space appears: IPv4 192.0.2.0/24, 198.51.100.0/24 and
 * 203.0.113.0/24 (RFC 5737), IPv6 2001:db8::/32 (RFC 3849), AS numbers 64496–64511
 * (RFC 5398). Clock times are UTC.
 *
 * Shared by `seed.ts` (a day of history) and `replay.ts` (live traffic), so the console
 * and the API tell one story either way.
 */
import type { FlowRecord } from "~/flow/record";
import { parsePrefix, type Prefix } from "~/net/prefix";
import { seededUniform, type UniformSource } from "~/sampling/uniform";

// ---- tenants -------------------------------------------------------------------------------

export interface DemoTenant {
  slug: string;
  name: string;
  sampleSize: number;
  windowSeconds: number;
  weightAttribute: "bytes" | "packets";
  retentionDays: number;
}

/**
 * Riverline keeps k = 256 per 5-minute window, small enough that daytime windows hold
 * several times k records, so estimates there carry visible intervals while quiet night
 * windows stay exact.
 */
export const DEMO_TENANTS: readonly DemoTenant[] = [
  { slug: "riverline", name: "Riverline Networks (demo)", sampleSize: 256, windowSeconds: 300, weightAttribute: "bytes", retentionDays: 30 },
  { slug: "tributary", name: "Tributary Cooperative (demo)", sampleSize: 128, windowSeconds: 900, weightAttribute: "bytes", retentionDays: 14 },
];

// ---- networks ------------------------------------------------------------------------------

/** Who opens connections: a customer's clients, a hoster's servers, or the carrier's probes. */
type Role = "clients" | "servers" | "probes";

interface Network {
  name: string;
  v4?: Prefix;
  v6?: Prefix;
  as: number;
  /** Active hosts, numbered from 1; low numbers are the busiest. */
  hosts: number;
  role: Role;
  /** The router interface the network hangs off (uplinks are 1 and 2). */
  ifIndex: number;
}

function network(name: string, v4: string | null, v6: string | null, as: number, hosts: number, role: Role, ifIndex: number): Network {
  return { name, v4: v4 ? parsePrefix(v4) : undefined, v6: v6 ? parsePrefix(v6) : undefined, as, hosts, role, ifIndex };
}

const CARRIER = network("Riverline infrastructure", "192.0.2.0/25", "2001:db8:1::/48", 64496, 20, "probes", 30);
const ALDER = network("Alder Clinic", "198.51.100.0/26", "2001:db8:a1::/48", 64497, 40, "clients", 11);
const BIRCH = network("Birch Logistics", "198.51.100.64/26", "2001:db8:b1::/48", 64498, 50, "clients", 12);
const CEDAR = network("Cedar School", "198.51.100.128/26", "2001:db8:ce::/48", 64499, 60, "clients", 21);
const DELTA = network("Delta Hosting", "203.0.113.0/25", "2001:db8:de::/48", 64500, 100, "servers", 22);
const EMBER = network("Ember Studio", null, "2001:db8:e::/48", 64501, 25, "clients", 14);
const TRIBUTARY = network("Tributary Cooperative", "198.51.100.192/26", "2001:db8:7::/48", 64502, 30, "clients", 13);

// Far ends: content networks serve most downloads; "peers" stand for the rest of the
// Internet (visitors of Delta's servers, SSH and high-port traffic).
const CONTENT = [0, 1, 2, 3].map((i) =>
  network(`content-${i + 1}`, `203.0.113.${128 + 32 * i}/27`, `2001:db8:10${i}::/48`, 64504 + i, 12, "servers", 1),
);
const CONTENT_POPULARITY = [0.45, 0.3, 0.15, 0.1];
const PEERS = [0, 1, 2, 3].map((i) =>
  network(`peer-${i + 1}`, `192.0.2.${128 + 32 * i}/27`, `2001:db8:20${i}::/48`, 64508 + i, 30, "clients", 1),
);
const CUSTOMERS = [ALDER, BIRCH, CEDAR, DELTA, EMBER, TRIBUTARY];

// Well-known hosts, as host numbers inside their network.
const RESOLVER_HOST = 53; // 192.0.2.53
const NTP_HOST = 123; // 192.0.2.123
const DELTA_DNS_HOST = 53; // 203.0.113.53
const BACKUP_SOURCE_HOST = 6; // 198.51.100.70 at Birch
const BACKUP_TARGET_HOST = 20; // 203.0.113.20 at Delta

const UPLINKS = [1, 2];

/** Host number `host` of a network: IPv4 counts up from the network address; IPv6 spreads hosts over four /64s. */
function hostAddress(prefix: Prefix, host: number): Uint8Array {
  const bytes = prefix.bytes.slice();
  if (prefix.family === 4) {
    bytes[14] |= (host >> 8) & 0xff;
    bytes[15] |= host & 0xff;
  } else {
    bytes[7] = host & 3;
    bytes[14] = (host >> 8) & 0xff;
    bytes[15] = host & 0xff;
  }
  return bytes;
}

// ---- services ------------------------------------------------------------------------------

/**
 * Flow sizes in bytes. Pareto laws (x_min / u^(1/α), capped) for transfers: a few flows
 * carry most bytes, as measured traffic does — common practice to model flow sizes so.
 * Uniform ranges for the small fixed-size exchanges (DNS, NTP, ICMP).
 */
type Size = { pareto: { min: number; alpha: number; max: number } } | { uniform: { min: number; max: number } };

interface Service {
  /** TCP 6 or UDP 17; ICMP services use 1 (IPv4) or 58 (ICMPv6, RFC 4443). */
  proto: 6 | 17 | "icmp";
  /** The server's port; null for a random high port. ICMP flows carry no ports. */
  port: number | null;
  /** Server→client flows (downloads, answers) and client→server flows (requests). */
  response: Size;
  request: Size;
  responseShare: number;
  /** Typical IP packet sizes in bytes, within 64–1500. */
  responsePacket: [number, number];
  requestPacket: [number, number];
}

const SERVICES = {
  https: { proto: 6, port: 443, response: { pareto: { min: 3000, alpha: 1.1, max: 2e9 } }, request: { pareto: { min: 300, alpha: 1.5, max: 5e7 } }, responseShare: 0.6, responsePacket: [1200, 1500], requestPacket: [64, 600] },
  quic: { proto: 17, port: 443, response: { pareto: { min: 2500, alpha: 1.15, max: 1e9 } }, request: { pareto: { min: 300, alpha: 1.5, max: 2e7 } }, responseShare: 0.6, responsePacket: [1200, 1350], requestPacket: [64, 400] },
  http: { proto: 6, port: 80, response: { pareto: { min: 1500, alpha: 1.15, max: 1e9 } }, request: { pareto: { min: 250, alpha: 1.6, max: 1e6 } }, responseShare: 0.55, responsePacket: [1000, 1500], requestPacket: [64, 600] },
  dns: { proto: 17, port: 53, response: { uniform: { min: 90, max: 512 } }, request: { uniform: { min: 64, max: 110 } }, responseShare: 0.5, responsePacket: [90, 512], requestPacket: [64, 110] },
  ntp: { proto: 17, port: 123, response: { uniform: { min: 76, max: 180 } }, request: { uniform: { min: 76, max: 180 } }, responseShare: 0.5, responsePacket: [76, 90], requestPacket: [76, 90] },
  ssh: { proto: 6, port: 22, response: { pareto: { min: 1000, alpha: 1.05, max: 5e9 } }, request: { pareto: { min: 500, alpha: 1.3, max: 1e8 } }, responseShare: 0.5, responsePacket: [600, 1500], requestPacket: [64, 300] },
  icmp: { proto: "icmp", port: null, response: { uniform: { min: 64, max: 3000 } }, request: { uniform: { min: 64, max: 3000 } }, responseShare: 0.5, responsePacket: [64, 1500], requestPacket: [64, 1500] },
  high: { proto: 17, port: null, response: { pareto: { min: 400, alpha: 1.25, max: 1e9 } }, request: { pareto: { min: 400, alpha: 1.25, max: 1e9 } }, responseShare: 0.5, responsePacket: [200, 1500], requestPacket: [200, 1500] },
} satisfies Record<string, Service>;

type ServiceName = keyof typeof SERVICES;

/** What each role's hosts talk, as shares of its flows. */
const MIX: Record<Role, [ServiceName, number][]> = {
  clients: [["https", 0.4], ["quic", 0.1], ["http", 0.07], ["dns", 0.2], ["ntp", 0.04], ["ssh", 0.03], ["icmp", 0.04], ["high", 0.12]],
  servers: [["https", 0.55], ["http", 0.15], ["dns", 0.2], ["ssh", 0.05], ["icmp", 0.05]],
  probes: [["icmp", 0.6], ["ssh", 0.25], ["dns", 0.15]],
};

// ---- sites (collectors) and events ---------------------------------------------------------

export interface ScenarioEvent {
  description: string;
  /** Active from `fromMinute` (inclusive) to `toMinute` (exclusive), in minutes after 00:00 UTC. */
  fromMinute: number;
  toMinute: number;
  flowsPerMinute: number;
  draw(u: UniformSource): Flow;
}

export interface Site {
  tenant: string;
  collector: string;
  /** Flows per minute at the busiest time of day (17:00 UTC). */
  peakFlowsPerMinute: number;
  /** Probes run on a timer, not on people's daily rhythm. */
  steady: boolean;
  locals: [Network, number][];
  events: ScenarioEvent[];
}

/** A flow before it is placed in time. */
interface Flow {
  /** Times still null: the caller sets them (in place; an object spread per flow made the seed twice as slow). */
  record: FlowRecord;
  durationMs: number;
}

const DNS_BURST: ScenarioEvent = {
  description: "DNS burst, 14:20–14:50 UTC at pop-south: queries from many sources toward 203.0.113.53 port 53 (Delta Hosting)",
  fromMinute: 14 * 60 + 20,
  toMinute: 14 * 60 + 50,
  flowsPerMinute: 600,
  draw(u) {
    const peer = PEERS[Math.floor(u() * PEERS.length)];
    const bytes = pareto(70, 1.6, 40_000, u);
    return {
      record: {
        src: hostAddress(peer.v4!, 1 + Math.floor(u() * peer.hosts)),
        dst: hostAddress(DELTA.v4!, DELTA_DNS_HOST),
        sport: ephemeralPort(u),
        dport: 53,
        proto: 17,
        bytes: BigInt(bytes),
        packets: BigInt(packetsFor(bytes, [64, 120], u)),
        ingressInterface: UPLINKS[Math.floor(u() * UPLINKS.length)],
        egressInterface: DELTA.ifIndex,
        srcAs: peer.as,
        dstAs: DELTA.as,
        start: null,
        end: null,
      },
      durationMs: Math.floor(u() * 2000),
    };
  },
};

const NIGHT_BACKUP: ScenarioEvent = {
  description: "Night backup, 01:30–03:30 UTC at pop-north: bulk SSH transfers from 198.51.100.70 (Birch Logistics) to 203.0.113.20 (Delta Hosting)",
  fromMinute: 90,
  toMinute: 210,
  flowsPerMinute: 1,
  draw(u) {
    const bytes = 5_000_000 + Math.floor(u() * 20_000_000);
    return {
      record: {
        src: hostAddress(BIRCH.v4!, BACKUP_SOURCE_HOST),
        dst: hostAddress(DELTA.v4!, BACKUP_TARGET_HOST),
        sport: ephemeralPort(u),
        dport: 22,
        proto: 6,
        bytes: BigInt(bytes),
        packets: BigInt(packetsFor(bytes, [1400, 1500], u)),
        ingressInterface: BIRCH.ifIndex,
        egressInterface: UPLINKS[0],
        srcAs: BIRCH.as,
        dstAs: DELTA.as,
        start: null,
        end: null,
      },
      durationMs: durationFor(bytes, u),
    };
  },
};

/**
 * Every flow is exported by the PoP where it enters Riverline's network only, so no flow
 * is counted twice across collectors.
 */
export const SITES: readonly Site[] = [
  { tenant: "riverline", collector: "pop-north", peakFlowsPerMinute: 240, steady: false, locals: [[ALDER, 0.25], [BIRCH, 0.3], [TRIBUTARY, 0.2], [EMBER, 0.25]], events: [NIGHT_BACKUP] },
  { tenant: "riverline", collector: "pop-south", peakFlowsPerMinute: 150, steady: false, locals: [[CEDAR, 0.55], [DELTA, 0.45]], events: [DNS_BURST] },
  { tenant: "riverline", collector: "edge-lab", peakFlowsPerMinute: 6, steady: true, locals: [[CARRIER, 1]], events: [] },
  { tenant: "tributary", collector: "office-gw", peakFlowsPerMinute: 60, steady: false, locals: [[TRIBUTARY, 1]], events: [] },
];

export function findSite(collector: string): Site | undefined {
  return SITES.find((site) => site.collector === collector);
}

// ---- drawing -------------------------------------------------------------------------------

const MINUTE_MS = 60_000;
export const MINUTES_PER_DAY = 1440;

/**
 * Share of the peak rate at a minute of the day: a smooth daily rhythm, lowest (0.15) at
 * 05:00 UTC and highest (1) at 17:00 UTC.
 */
export function dailyActivity(minuteOfDay: number): number {
  return 0.15 + 0.85 * (0.5 - 0.5 * Math.cos((2 * Math.PI * (minuteOfDay - 300)) / MINUTES_PER_DAY));
}

function activeEvents(site: Site, minuteOfDay: number): ScenarioEvent[] {
  return site.events.filter((e) => minuteOfDay >= e.fromMinute && minuteOfDay < e.toMinute);
}

/** How many flows a site records in a given minute of the day; the same every day. */
export function flowsPerMinute(site: Site, minuteOfDay: number): number {
  const base = Math.round(site.peakFlowsPerMinute * (site.steady ? 1 : dailyActivity(minuteOfDay)));
  return base + activeEvents(site, minuteOfDay).reduce((sum, e) => sum + e.flowsPerMinute, 0);
}

function minuteOfDayAt(timeMs: number): number {
  return Math.floor((timeMs % (MINUTES_PER_DAY * MINUTE_MS)) / MINUTE_MS);
}

function pick<T>(choices: readonly [T, number][], u: UniformSource): T {
  let total = 0;
  for (const [, weight] of choices) total += weight;
  let x = u() * total;
  for (const [choice, weight] of choices) {
    x -= weight;
    if (x < 0) return choice;
  }
  return choices[choices.length - 1][0];
}

function pareto(min: number, alpha: number, max: number, u: UniformSource): number {
  return Math.round(Math.min(max, min / Math.pow(u(), 1 / alpha)));
}

function drawSize(size: Size, u: UniformSource): number {
  const bytes = "pareto" in size ? pareto(size.pareto.min, size.pareto.alpha, size.pareto.max, u) : size.uniform.min + Math.floor(u() * (size.uniform.max - size.uniform.min + 1));
  return Math.max(64, bytes);
}

/** A packet count that keeps the mean packet size within 64–1500 bytes (an Ethernet MTU). */
function packetsFor(bytes: number, [low, high]: [number, number], u: UniformSource): number {
  const packetBytes = low + u() * (high - low);
  const fewest = Math.ceil(bytes / 1500);
  const most = Math.max(1, Math.floor(bytes / 64));
  return Math.min(most, Math.max(fewest, Math.round(bytes / packetBytes)));
}

/** Setup time plus transfer at a rate between 2 Mbit/s and 500 Mbit/s, cut at 5 minutes as an exporter's active timeout would. */
function durationFor(bytes: number, u: UniformSource): number {
  const bitsPerSecond = 2e6 * Math.pow(250, u());
  return Math.min(300_000, Math.round(5 + u() * 195 + (bytes * 8 * 1000) / bitsPerSecond));
}

/** A client port from the Linux default ephemeral range 32768–60999. */
function ephemeralPort(u: UniformSource): number {
  return 32768 + Math.floor(u() * 28232);
}

function busyHost(net: Network, u: UniformSource): number {
  const x = u();
  return 1 + Math.floor(net.hosts * x * x);
}

/** The far end a local host of this role talks to for a service, and that end's host number. */
function farEnd(role: Role, service: ServiceName, u: UniformSource): { net: Network; host: number } {
  if (role === "probes") {
    const net = CUSTOMERS[Math.floor(u() * CUSTOMERS.length)];
    return { net, host: busyHost(net, u) };
  }
  if (role === "clients") {
    if (service === "dns") return { net: CARRIER, host: RESOLVER_HOST };
    if (service === "ntp") return { net: CARRIER, host: NTP_HOST };
    if (service === "https" || service === "quic" || service === "http") {
      const net = pick(CONTENT.map((n, i): [Network, number] => [n, CONTENT_POPULARITY[i]]), u);
      return { net, host: busyHost(net, u) };
    }
  }
  const net = PEERS[Math.floor(u() * PEERS.length)];
  return { net, host: busyHost(net, u) };
}

function drawBaseFlow(site: Site, u: UniformSource): Flow {
  const local = pick(site.locals, u);
  const serviceName = pick(MIX[local.role], u);
  const service: Service = SERVICES[serviceName];
  const far = farEnd(local.role, serviceName, u);
  const localHost = local.role === "servers" && serviceName === "dns" ? DELTA_DNS_HOST : busyHost(local, u);

  // Prefer IPv4 three times in ten where both ends have both families.
  const bothV4 = local.v4 !== undefined && far.net.v4 !== undefined;
  const bothV6 = local.v6 !== undefined && far.net.v6 !== undefined;
  const v6 = bothV6 && (!bothV4 || u() < 0.3);
  const localAddress = hostAddress(v6 ? local.v6! : local.v4!, localHost);
  const farAddress = hostAddress(v6 ? far.net.v6! : far.net.v4!, far.host);

  // Customers' clients and the carrier's probes open connections outward; Delta's servers answer.
  const fromServer = u() < service.responseShare;
  const localSends = (local.role === "servers") === fromServer;

  const bytes = drawSize(fromServer ? service.response : service.request, u);
  const packets = packetsFor(bytes, fromServer ? service.responsePacket : service.requestPacket, u);
  const serverPort = service.proto === "icmp" ? 0 : (service.port ?? 1024 + Math.floor(u() * 64512));
  const clientPort = service.proto === "icmp" ? 0 : ephemeralPort(u);
  const uplink = UPLINKS[Math.floor(u() * UPLINKS.length)];
  const proto = service.proto === "icmp" ? (v6 ? 58 : 1) : service.proto;

  const [src, dst] = localSends ? [localAddress, farAddress] : [farAddress, localAddress];
  const [srcNet, dstNet] = localSends ? [local, far.net] : [far.net, local];
  return {
    record: {
      src,
      dst,
      sport: fromServer ? serverPort : clientPort,
      dport: fromServer ? clientPort : serverPort,
      proto,
      bytes: BigInt(bytes),
      packets: BigInt(packets),
      ingressInterface: localSends ? local.ifIndex : uplink,
      egressInterface: localSends ? uplink : local.ifIndex,
      srcAs: srcNet.as,
      dstAs: dstNet.as,
      start: null,
      end: null,
    },
    durationMs: durationFor(bytes, u),
  };
}

/** One flow as the site would see it at that minute of the day, events included. */
function drawFlow(site: Site, minuteOfDay: number, u: UniformSource): Flow {
  const events = activeEvents(site, minuteOfDay);
  if (events.length > 0) {
    const total = flowsPerMinute(site, minuteOfDay);
    let x = u() * total;
    for (const event of events) {
      x -= event.flowsPerMinute;
      if (x < 0) return event.draw(u);
    }
  }
  return drawBaseFlow(site, u);
}

/** FNV-1a over text: turns (seed, collector, minute) into a PRNG seed. */
function hash32(text: string): number {
  let h = 0x811c9dc5;
  for (let i = 0; i < text.length; i++) {
    h ^= text.charCodeAt(i);
    h = Math.imul(h, 0x01000193);
  }
  return h >>> 0;
}

/**
 * The flows a site records in the minute starting at `minuteStartMs`, starting inside it
 * and ending no later than `endLimitMs`. Each minute of the day draws from its own seeded
 * stream, so the same minute of the day holds the same flows on every day and every run.
 */
export function minuteOfFlows(site: Site, minuteStartMs: number, endLimitMs: number, seed: number): FlowRecord[] {
  const minuteOfDay = minuteOfDayAt(minuteStartMs);
  const u = seededUniform(hash32(`${seed}/${site.collector}/${minuteOfDay}`));
  const count = flowsPerMinute(site, minuteOfDay);
  const flows: FlowRecord[] = new Array(count);
  for (let i = 0; i < count; i++) {
    const start = minuteStartMs + Math.floor(u() * MINUTE_MS);
    const { record, durationMs } = drawFlow(site, minuteOfDay, u);
    record.start = start;
    record.end = Math.min(endLimitMs, start + durationMs);
    flows[i] = record;
  }
  return flows;
}

/**
 * The day of flows a site records up to `endMs` (rounded down to a whole minute): 1440
 * arrays, one per minute, oldest first.
 */
export function* dayOfFlows(site: Site, endMs: number, seed: number): Generator<FlowRecord[]> {
  const lastMinute = Math.floor(endMs / MINUTE_MS) * MINUTE_MS;
  for (let m = MINUTES_PER_DAY; m >= 1; m--) {
    yield minuteOfFlows(site, lastMinute - m * MINUTE_MS, lastMinute, seed);
  }
}

/** How many flows a site records in one day (the same for every day). */
export function flowsPerDay(site: Site): number {
  let total = 0;
  for (let m = 0; m < MINUTES_PER_DAY; m++) total += flowsPerMinute(site, m);
  return total;
}

/**
 * `count` flows that ended just before `nowMs`, as an exporter sends them live: the mix
 * of the current minute of the day, drawn from `u`.
 */
export function liveFlows(site: Site, count: number, nowMs: number, u: UniformSource): FlowRecord[] {
  const minuteOfDay = minuteOfDayAt(nowMs);
  const flows: FlowRecord[] = new Array(count);
  for (let i = 0; i < count; i++) {
    const { record, durationMs } = drawFlow(site, minuteOfDay, u);
    const end = nowMs - Math.floor(u() * 1000);
    record.start = end - durationMs;
    record.end = end;
    flows[i] = record;
  }
  return flows;
}

/** A stable seed for a site's live stream. */
export function liveSeed(seed: number, collector: string): number {
  return hash32(`${seed}/live/${collector}`);
}
