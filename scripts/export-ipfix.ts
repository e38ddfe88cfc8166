// `npm run export-ipfix -- --to HOST:PORT | --file PATH [...]`: a small IPFIX exporter
// (RFC 7011) for trying Weir's native collection without a router. It draws flows of the
// INVENTED demo scenario (`scenario.ts`, documentation addresses only) and sends them as IPFIX
// messages over UDP to a listener, at about a given rate — or writes them as an IPFIX file
// (RFC 5655) for POST /api/v1/flows with Content-Type application/ipfix. Bounded: it stops
// after --duration seconds (or --records for a file) or on Ctrl-C.
import { createSocket } from "node:dgram";
import { writeFileSync } from "node:fs";
import { isIP } from "node:net";
import { parseArgs, type ParseArgsConfig } from "node:util";
import type { FlowRecord } from "~/flow/record";
import { formatAddress } from "~/net/address";
import { seededUniform } from "~/sampling/uniform";
import { ipfixMessage, type Field, type Value } from "./ipfix/encode";
import { SITES, findSite, liveFlows, liveSeed } from "./scenario";

const USAGE = `Usage: npm run export-ipfix -- (--to HOST:PORT | --file PATH) [options]

Sends synthetic flows of the demo scenario as IPFIX messages over UDP, as a router's exporter
would (templates first and every 20 messages, sequence numbers per RFC 7011 §3.1), or writes
them as an IPFIX file.

  --to HOST:PORT     a Weir IPFIX UDP listener, e.g. 127.0.0.1:4739 (IPFIX_UDP_PORT). Weir
                     feeds a collector only from a claimed exporter: claim this machine's
                     address first (the demo claims 127.0.0.1 for riverline's lab-probe).
  --from ADDRESS     local address to send from (default: the system's choice); any
                     127.0.0.0/8 address works on loopback, e.g. 127.0.0.2 to appear as an
                     unclaimed exporter
  --file PATH        write an IPFIX file instead of sending
  --collector NAME   scenario site whose traffic to draw (default pop-north); one of
                     ${SITES.map((s) => s.collector).join(", ")}
  --rate N           records per second when sending (default 500, at most 200000)
  --duration S       stop sending after S seconds (default 60, at most 86400)
  --records N        records in a file (default 5000, at most 1000000)
  --domain N         Observation Domain ID (default 1)
  --seed N           seed of the flow generator (default 7)
  --help             show this text

Exit status: 0 done, 2 bad options, 1 anything else.`;

class UsageError extends Error {}

// IANA element ids (RFC 7012 / the IANA IPFIX registry) of what the messages carry.
const COMMON: Field[] = [
  { id: 7, length: 2 }, // sourceTransportPort
  { id: 11, length: 2 }, // destinationTransportPort
  { id: 4, length: 1 }, // protocolIdentifier
  { id: 1, length: 8 }, // octetDeltaCount
  { id: 2, length: 8 }, // packetDeltaCount
  { id: 152, length: 8 }, // flowStartMilliseconds
  { id: 153, length: 8 }, // flowEndMilliseconds
  { id: 10, length: 4 }, // ingressInterface
  { id: 14, length: 4 }, // egressInterface
  { id: 16, length: 4 }, // bgpSourceAsNumber
  { id: 17, length: 4 }, // bgpDestinationAsNumber
];
const V4: Field[] = [{ id: 8, length: 4 }, { id: 12, length: 4 }, ...COMMON];
const V6: Field[] = [{ id: 27, length: 16 }, { id: 28, length: 16 }, ...COMMON];
const V4_TEMPLATE = 256;
const V6_TEMPLATE = 257;
const RECORDS_PER_MESSAGE = 25;
const TEMPLATE_EVERY = 20;

function values(r: FlowRecord): Value[] {
  return [formatAddress(r.src), formatAddress(r.dst), r.sport, r.dport, r.proto, r.bytes, r.packets, r.start ?? 0, r.end ?? r.start ?? 0,
    r.ingressInterface ?? 0, r.egressInterface ?? 0, r.srcAs ?? 0, r.dstAs ?? 0];
}

/** Builds messages of one exporter: templates in the first and every TEMPLATE_EVERY-th, sequence numbers counting data records. */
class Exporter {
  private messages = 0;
  private sequence = 0;
  constructor(private readonly domain: number) {}

  message(records: FlowRecord[], nowMs: number): Uint8Array {
    const v4 = records.filter((r) => isIP(formatAddress(r.src)) === 4);
    const v6 = records.filter((r) => isIP(formatAddress(r.src)) === 6);
    const withTemplates = this.messages % TEMPLATE_EVERY === 0;
    const bytes = ipfixMessage({
      exportTime: Math.floor(nowMs / 1000),
      sequence: this.sequence,
      domain: this.domain,
      sets: [
        ...(withTemplates ? [{ templates: [{ id: V4_TEMPLATE, fields: V4 }, { id: V6_TEMPLATE, fields: V6 }] }] : []),
        ...(v4.length > 0 ? [{ templateId: V4_TEMPLATE, fields: V4, records: v4.map(values) }] : []),
        ...(v6.length > 0 ? [{ templateId: V6_TEMPLATE, fields: V6, records: v6.map(values) }] : []),
      ],
    });
    this.messages++;
    this.sequence = (this.sequence + records.length) % 2 ** 32;
    return bytes;
  }
}

function wholeNumber(text: string | undefined, flag: string, fallback: number, min: number, max: number): number {
  if (text === undefined) return fallback;
  if (!/^\d{1,10}$/.test(text)) throw new UsageError(`--${flag} must be a whole number, got '${text}'`);
  const value = Number(text);
  if (value < min || value > max) throw new UsageError(`--${flag} must be from ${min} to ${max}, got ${value}`);
  return value;
}

/** parseArgs, with its complaints (unknown option, missing value) as usage errors. */
function parseArgsOrExplain<T extends ParseArgsConfig>(config: T): ReturnType<typeof parseArgs<T>> {
  try {
    return parseArgs(config);
  } catch (error) {
    throw new UsageError((error as Error).message);
  }
}

async function main(): Promise<number> {
  try {
    const { values } = parseArgsOrExplain({
      args: process.argv.slice(2),
      options: {
        to: { type: "string" },
        from: { type: "string" },
        file: { type: "string" },
        collector: { type: "string", default: "pop-north" },
        rate: { type: "string" },
        duration: { type: "string" },
        records: { type: "string" },
        domain: { type: "string" },
        seed: { type: "string" },
        help: { type: "boolean", short: "h" },
      },
      strict: true,
    });
    if (values.help) {
      console.log(USAGE);
      return 0;
    }
    if ((values.to === undefined) === (values.file === undefined)) throw new UsageError("give either --to HOST:PORT or --file PATH");
    const site = findSite(values.collector);
    if (!site) throw new UsageError(`unknown scenario collector '${values.collector}' (one of ${SITES.map((s) => s.collector).join(", ")})`);
    const domain = wholeNumber(values.domain, "domain", 1, 0, 4_294_967_295);
    const u = seededUniform(liveSeed(wholeNumber(values.seed, "seed", 7, 0, 2 ** 31), site.collector));
    const exporter = new Exporter(domain);

    if (values.file !== undefined) {
      const total = wholeNumber(values.records, "records", 5000, 1, 1_000_000);
      const now = Date.now();
      const parts: Uint8Array[] = [];
      for (let done = 0; done < total; done += RECORDS_PER_MESSAGE) parts.push(exporter.message(liveFlows(site, Math.min(RECORDS_PER_MESSAGE, total - done), now, u), now));
      writeFileSync(values.file, Buffer.concat(parts));
      console.log(`Wrote ${total.toLocaleString("en-US")} flow records in ${parts.length} IPFIX messages to ${values.file}`);
      return 0;
    }

    const target = /^(.+):(\d{1,5})$/.exec(values.to!);
    const host = target?.[1].replace(/^\[(.*)\]$/, "$1");
    if (!target || !host || isIP(host) === 0 || Number(target[2]) > 65535) throw new UsageError(`--to must be ADDRESS:PORT, e.g. 127.0.0.1:4739, got '${values.to}'`);
    if (values.from !== undefined && isIP(values.from) !== isIP(host)) throw new UsageError(`--from must be an address of the same family as --to, got '${values.from}'`);
    const rate = wholeNumber(values.rate, "rate", 500, 1, 200_000);
    const durationMs = wholeNumber(values.duration, "duration", 60, 1, 86_400) * 1000;
    const socket = createSocket(isIP(host) === 6 ? "udp6" : "udp4");
    const from = values.from;
    await new Promise<void>((resolve, reject) => {
      socket.once("error", reject);
      socket.bind(0, from, () => resolve());
    });
    let stopping = false;
    process.on("SIGINT", () => (stopping = true));
    console.log(`Exporting the ${site.collector} scenario as IPFIX to ${values.to} from ${socket.address().address}: ~${rate} records/s for ${durationMs / 1000} s (domain ${domain})`);
    const startedAt = Date.now();
    let sent = 0;
    let messages = 0;
    let lastSend = startedAt;
    while (!stopping && Date.now() - startedAt < durationMs) {
      const now = Date.now();
      let due = Math.floor((rate * (now - startedAt)) / 1000) - sent;
      // Full messages while enough is due; below that, what is due at least once a second.
      while (due >= RECORDS_PER_MESSAGE || (due > 0 && now - lastSend >= 1000)) {
        const count = Math.min(RECORDS_PER_MESSAGE, due);
        const message = exporter.message(liveFlows(site, count, now, u), now);
        await new Promise<void>((resolve, reject) => socket.send(message, Number(target[2]), host, (error) => (error ? reject(error) : resolve())));
        sent += count;
        due -= count;
        messages++;
        lastSend = now;
      }
      await new Promise((resolve) => setTimeout(resolve, 20));
    }
    socket.close();
    console.log(`Sent ${sent.toLocaleString("en-US")} flow records in ${messages.toLocaleString("en-US")} messages.`);
    return 0;
  } catch (error) {
    if (!(error instanceof UsageError)) throw error;
    console.error(`export-ipfix: ${error.message}\n(npm run export-ipfix -- --help for usage)`);
    return 2;
  }
}

process.exitCode = await main();
