// A real exporter and two reference decoders, for tests only:
// - Debian's softflowd (1.1.0) reads a pcap and exports its flows as IPFIX (RFC 7011) or
//   NetFlow v9 (RFC 3954) over UDP;
// - a loopback UDP socket collects what it sends;
// - Debian's tshark (4.0) and ipfixDump (libfixbuf 2.4) decode the same datagrams, so a test can
//   compare Weir's counters with decoders that are not Weir's.
// Their output formats are read here and nowhere else; nothing of them goes into the product.
import { execFile, spawn } from "node:child_process";
import dgram from "node:dgram";
import { mkdtempSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { IPFIXDUMP, SOFTFLOWD, TSHARK } from "../global-setup";
import { canonicalAddress } from "./flow-scenario";
import { udpCapture } from "./pcap";

export interface SoftflowdOptions {
  pcapPath: string;
  port: number;
  /** 10 for IPFIX, 9 for NetFlow v9 (`-v`). */
  version: 9 | 10;
  host?: string;
  /** e.g. ["-A", "milli"] for absolute flowStart/EndMilliseconds, ["-b"] for RFC 5103 biflows. */
  extraArgs?: string[];
  timeoutMs?: number;
}

export interface SoftflowdRun {
  args: string[];
  stdout: string;
  stderr: string;
  /** From softflowd's closing statistics: "Flows exported: F (R records) in P packets (X failures)". */
  exported: { flows: number; records: number; datagrams: number; failures: number };
}

/**
 * Runs softflowd over a pcap, sending to host:port, and resolves once it has exited after
 * exporting everything. What was seen with softflowd 1.1.0:
 * - with `-r` it stays in the foreground by itself, reads to the end of the file, then expires every
 *   flow ("flushed"), sends them and exits 0, printing statistics on stdout;
 * - with a control socket (`-c`) it keeps polling that socket after the end of the file and never
 *   exits, so none is given;
 * - on exit it unlinks its pid file path (default /var/run/softflowd.pid, which may be a running
 *   daemon's), so `-p` points into a temporary directory;
 * - `-a` takes flow times from the pcap's timestamps instead of the clock;
 * - it counts octets as the captured frame length less the link-layer header, so Ethernet padding of
 *   short frames would be counted: give it LINKTYPE_RAW captures to count IP total lengths.
 */
export function runSoftflowd(options: SoftflowdOptions): Promise<SoftflowdRun> {
  const dir = mkdtempSync(join(tmpdir(), "weir-softflowd-"));
  const args = [
    "-r", options.pcapPath,
    "-n", `${options.host ?? "127.0.0.1"}:${options.port}`,
    "-v", String(options.version),
    "-T", "full",
    "-a",
    "-p", join(dir, "softflowd.pid"),
    ...(options.extraArgs ?? []),
  ];
  const timeoutMs = options.timeoutMs ?? 20_000;
  return new Promise((resolve, reject) => {
    const child = spawn(SOFTFLOWD, args, { stdio: ["ignore", "pipe", "pipe"] });
    let stdout = "";
    let stderr = "";
    child.stdout.setEncoding("utf8").on("data", (chunk: string) => (stdout += chunk));
    child.stderr.setEncoding("utf8").on("data", (chunk: string) => (stderr += chunk));
    const finish = (error: Error | null, run?: SoftflowdRun) => {
      clearTimeout(timer);
      rmSync(dir, { recursive: true, force: true });
      if (error) reject(error);
      else resolve(run!);
    };
    const timer = setTimeout(() => {
      child.kill("SIGKILL");
      finish(new Error(`softflowd ${args.join(" ")} did not exit within ${timeoutMs} ms\nstderr:\n${stderr}\nstdout:\n${stdout}`));
    }, timeoutMs);
    child.on("error", (error) => finish(new Error(`could not start ${SOFTFLOWD}: ${error.message}`)));
    child.on("close", (code, signal) => {
      if (signal === "SIGKILL") return; // the timeout already reported it
      const match = /Flows exported: (\d+) \((\d+) records\) in (\d+) packets \((\d+) failures\)/.exec(stdout);
      if (code !== 0 || !match) {
        finish(new Error(`softflowd ${args.join(" ")} exited with ${code ?? signal}${match ? "" : " without its export statistics"}\nstderr:\n${stderr}\nstdout:\n${stdout}`));
        return;
      }
      const exported = { flows: Number(match[1]), records: Number(match[2]), datagrams: Number(match[3]), failures: Number(match[4]) };
      if (exported.failures > 0) {
        finish(new Error(`softflowd reported ${exported.failures} failed sends\nstderr:\n${stderr}\nstdout:\n${stdout}`));
        return;
      }
      finish(null, { args, stdout, stderr, exported });
    });
  });
}

export interface ReceivedDatagram {
  payload: Buffer;
  sourcePort: number;
  /** Arrival order stamp (µs since the epoch); only order matters to the readers of a capture. */
  receivedMicros: number;
}

export interface DatagramCapture {
  port: number;
  datagrams: ReceivedDatagram[];
  /** Resolves once `count` datagrams have arrived; rejects after `timeoutMs` saying how many did. */
  waitFor(count: number, timeoutMs?: number): Promise<ReceivedDatagram[]>;
  close(): Promise<void>;
}

/** A UDP socket on a free loopback port that keeps every datagram it receives, in arrival order. */
export function captureDatagrams(options: { host?: string } = {}): Promise<DatagramCapture> {
  const socket = dgram.createSocket({ type: "udp4", recvBufferSize: 8 * 1024 * 1024 });
  const datagrams: ReceivedDatagram[] = [];
  const waiters = new Set<() => void>();
  socket.on("message", (payload, remote) => {
    datagrams.push({ payload, sourcePort: remote.port, receivedMicros: Date.now() * 1000 + datagrams.length });
    for (const wake of waiters) wake();
  });
  return new Promise((resolve, reject) => {
    socket.once("error", reject);
    socket.bind(0, options.host ?? "127.0.0.1", () => {
      resolve({
        port: socket.address().port,
        datagrams,
        waitFor: (count, timeoutMs = 10_000) =>
          new Promise((done, fail) => {
            if (datagrams.length >= count) return done(datagrams);
            const timer = setTimeout(() => {
              waiters.delete(check);
              fail(new Error(`expected ${count} datagrams, received ${datagrams.length} within ${timeoutMs} ms`));
            }, timeoutMs);
            const check = () => {
              if (datagrams.length < count) return;
              clearTimeout(timer);
              waiters.delete(check);
              done(datagrams);
            };
            waiters.add(check);
          }),
        close: () => new Promise((done) => socket.close(() => done())),
      });
    });
  });
}

/** Either time form an exporter may use: relative to the exporter's boot (sysUpTime) or since the Unix epoch. */
export type FlowTime = { clock: "sysUpTime"; millis: number } | { clock: "epoch"; millis: number };

/** One flow record as a reference decoder showed it. */
export interface ReferenceFlow {
  /** Index of the message (datagram) the record came in. */
  message: number;
  templateId: number;
  sourceAddress: string;
  destinationAddress: string;
  protocol: number;
  sourcePort: number;
  destinationPort: number;
  /** ICMP type × 256 + code (icmpTypeCodeIPv4 / icmpTypeCodeIPv6), for ICMP records. */
  icmpTypeCode?: number;
  octets: number;
  packets: number;
  start?: FlowTime;
  end?: FlowTime;
}

export interface ReferenceMessage {
  version: number;
  /** IPFIX: sequence number (RFC 7011 §3.1); NetFlow v9: package sequence (RFC 3954 §5.1). */
  sequence: number;
  /** IPFIX Export Time, NetFlow v9 UNIX Secs: seconds since the epoch. */
  exportSeconds: number;
  /** NetFlow v9 only: the header's sysUpTime, milliseconds since the exporter's boot. */
  sysUptimeMillis?: number;
  /** NetFlow v9 only: the header's Count as sent. */
  count?: number;
  /** Observation Domain ID (IPFIX) or Source ID (NetFlow v9). */
  domain: number;
  /** Flow (data) records decoded from it, options data records apart. */
  flowRecords: number;
  optionsRecords: number;
  templateIds: number[];
}

export interface ReferenceDecode {
  decoder: "tshark" | "ipfixDump";
  messages: ReferenceMessage[];
  flows: ReferenceFlow[];
  /** Options data records, field name → value as the decoder printed them. */
  options: Record<string, string>[];
  /** systemInitTimeMilliseconds from an options record, when one was sent (IPFIX). */
  systemInitMillis?: number;
  totals: { flows: number; octets: number; packets: number };
}

const NETFLOW_V9 = 9;

/**
 * Decodes collected IPFIX or NetFlow v9 datagrams with tshark: they are written as a pcap of UDP
 * datagrams to `port` on loopback and read back with `-d udp.port==PORT,cflow -T json`. Templates
 * must come before the data they describe in the capture, as they did on the wire.
 *
 * NetFlow v9: softflowd 1.1.0 puts only the number of flow data records in the header's Count,
 * while RFC 3954 §5.1 makes it the number of all records (template and options ones too), and
 * tshark 4.0 stops reading a packet after Count FlowSets (seen: Count 7 in a packet of 10 FlowSets
 * showed the first 7) — so a packet with templates and few flow records loses its last FlowSets.
 * The copy handed to tshark therefore says Count 65535 (tshark still stops at the end of the
 * datagram); `count` in the result is the value softflowd sent.
 */
export async function referenceDecode(datagrams: readonly ReceivedDatagram[], port: number): Promise<ReferenceDecode> {
  const dir = mkdtempSync(join(tmpdir(), "weir-tshark-"));
  try {
    const sentCounts = datagrams.map((d) => (d.payload.readUInt16BE(0) === NETFLOW_V9 ? d.payload.readUInt16BE(2) : undefined));
    const forTshark = datagrams.map((d) => {
      if (d.payload.readUInt16BE(0) !== NETFLOW_V9) return d.payload;
      const copy = Buffer.from(d.payload);
      copy.writeUInt16BE(0xffff, 2);
      return copy;
    });
    const capturePath = join(dir, "export.pcap");
    writeFileSync(
      capturePath,
      udpCapture(forTshark.map((payload, i) => ({ payload, timeMicros: datagrams[i].receivedMicros, sourcePort: datagrams[i].sourcePort, destinationPort: port }))),
    );
    const json = await run(TSHARK, ["-r", capturePath, "-d", `udp.port==${port},cflow`, "-T", "json", "--no-duplicate-keys", "-J", "cflow"]);
    const frames = JSON.parse(json) as { _source: { layers: Record<string, unknown> } }[];
    if (frames.length !== datagrams.length) throw new Error(`tshark read ${frames.length} frames of ${datagrams.length}`);
    const decode = emptyDecode("tshark");
    frames.forEach((frame, index) => {
      const cflow = frame._source.layers.cflow;
      if (!isObject(cflow)) throw new Error(`tshark did not decode datagram ${index} as IPFIX/NetFlow`);
      readTsharkMessage(cflow, index, sentCounts[index], decode);
    });
    return finishDecode(decode);
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
}

function readTsharkMessage(cflow: Record<string, unknown>, index: number, sentCount: number | undefined, decode: ReferenceDecode) {
  const version = Number(text(cflow["cflow.version"]));
  const stamp = cflow["cflow.timestamp_tree"];
  const exportSeconds = Number(isObject(stamp) ? text(stamp["cflow.exporttime"] ?? stamp["cflow.unix_secs"]) : NaN);
  const message: ReferenceMessage = {
    version,
    sequence: Number(text(cflow["cflow.sequence"])),
    exportSeconds,
    sysUptimeMillis: cflow["cflow.sysuptime"] === undefined ? undefined : seconds(text(cflow["cflow.sysuptime"])) * 1000,
    count: version === NETFLOW_V9 ? sentCount : undefined,
    domain: Number(text(cflow["cflow.od_id"] ?? cflow["cflow.source_id"])),
    flowRecords: 0,
    optionsRecords: 0,
    templateIds: [],
  };
  for (const [setName, set] of Object.entries(cflow)) {
    if (!/^(Set|FlowSet) \d+/.test(setName)) continue;
    for (const body of asList(set)) {
      if (!isObject(body)) continue;
      const setId = Number(text(body["cflow.flowset_id"]));
      for (const [name, value] of Object.entries(body)) {
        if (/^(Options )?Template \(Id = \d+/.test(name)) {
          for (const template of asList(value)) if (isObject(template)) message.templateIds.push(Number(text(template["cflow.template_id"])));
        }
        if (!/^Flow \d+$/.test(name)) continue;
        for (const record of asList(value)) {
          if (!isObject(record)) continue;
          if (record["cflow.octets"] === undefined && record["cflow.packets"] === undefined) {
            decode.options.push(flatten(record));
            message.optionsRecords += 1;
            continue;
          }
          decode.flows.push(tsharkFlow(record, index, setId));
          message.flowRecords += 1;
        }
      }
    }
  }
  decode.messages.push(message);
}

function tsharkFlow(record: Record<string, unknown>, message: number, templateId: number): ReferenceFlow {
  const field = (name: string) => (record[name] === undefined ? undefined : text(record[name]));
  const protocol = Number(field("cflow.protocol"));
  let icmpTypeCode: number | undefined;
  if (field("cflow.icmp_type_code_ipv4") !== undefined) icmpTypeCode = Number(field("cflow.icmp_type_code_ipv4"));
  else if (field("cflow.icmp_type_code_ipv6") !== undefined) icmpTypeCode = Number(field("cflow.icmp_type_code_ipv6"));
  else if (field("cflow.icmp_ipv4_type") !== undefined) icmpTypeCode = Number(field("cflow.icmp_ipv4_type")) * 256 + Number(field("cflow.icmp_ipv4_code") ?? 0);
  else if (field("cflow.icmp_ipv6_type") !== undefined) icmpTypeCode = Number(field("cflow.icmp_ipv6_type")) * 256 + Number(field("cflow.icmp_ipv6_code") ?? 0);
  const times = isObject(record["cflow.timedelta_tree"]) ? record["cflow.timedelta_tree"] : record;
  return {
    message,
    templateId,
    sourceAddress: canonicalAddress(required(field("cflow.srcaddr") ?? field("cflow.srcaddrv6"), "source address")),
    destinationAddress: canonicalAddress(required(field("cflow.dstaddr") ?? field("cflow.dstaddrv6"), "destination address")),
    protocol,
    sourcePort: Number(field("cflow.srcport") ?? 0),
    destinationPort: Number(field("cflow.dstport") ?? 0),
    icmpTypeCode,
    octets: Number(required(field("cflow.octets"), "octets")),
    packets: Number(required(field("cflow.packets"), "packets")),
    start: tsharkTime(times, "start"),
    end: tsharkTime(times, "end"),
  };
}

// tshark shows sysUpTime-relative times as seconds ("cflow.timestart": "0.005000000") and absolute
// ones as dates ("cflow.abstimestart": "Nov 14, 2023 22:13:20.004000000 UTC"). Seen with tshark 4.0:
// a flowStartSysUpTime of 0 comes out as the absolute date 1970-01-01 00:00:00, so a "date" within
// the epoch's first day is read back as a sysUpTime.
function tsharkTime(times: Record<string, unknown>, which: "start" | "end"): FlowTime | undefined {
  const relative = times[`cflow.time${which}`];
  if (relative !== undefined) return { clock: "sysUpTime", millis: seconds(text(relative)) * 1000 };
  const absolute = times[`cflow.abstime${which}`];
  if (absolute === undefined) return undefined;
  const millis = tsharkDateMillis(text(absolute));
  return millis < 86_400_000 ? { clock: "sysUpTime", millis } : { clock: "epoch", millis };
}

const MONTHS = ["Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec"];

/** "Nov 14, 2023 22:13:20.004000000 UTC" → milliseconds since the epoch (fractions of a millisecond kept). */
export function tsharkDateMillis(value: string): number {
  const m = /^([A-Z][a-z]{2})\s+(\d{1,2}), (\d{4}) (\d{2}):(\d{2}):(\d{2})(?:\.(\d+))? UTC$/.exec(value.trim());
  if (!m || !MONTHS.includes(m[1])) throw new Error(`unexpected tshark date ${JSON.stringify(value)}`);
  const whole = Date.UTC(Number(m[3]), MONTHS.indexOf(m[1]), Number(m[2]), Number(m[4]), Number(m[5]), Number(m[6]));
  return whole + fractionMillis(m[7]);
}

/** "53.944000000" → 53.944, without binary rounding of the millisecond part. */
function seconds(value: string): number {
  const m = /^(\d+)(?:\.(\d+))?$/.exec(value.trim());
  if (!m) throw new Error(`unexpected tshark duration ${JSON.stringify(value)}`);
  return Number(m[1]) + fractionMillis(m[2]) / 1000;
}

function fractionMillis(digits: string | undefined): number {
  if (!digits) return 0;
  const nanos = Number(digits.padEnd(9, "0").slice(0, 9));
  return nanos / 1e6;
}

/**
 * Decodes collected IPFIX datagrams with ipfixDump: written back to back they form an IPFIX file
 * (RFC 5655 §5: a file is a sequence of IPFIX messages), read with `ipfixDump -i FILE`.
 */
export async function ipfixDumpDecode(datagrams: readonly ReceivedDatagram[]): Promise<ReferenceDecode> {
  const dir = mkdtempSync(join(tmpdir(), "weir-ipfixdump-"));
  try {
    const filePath = join(dir, "export.ipfix");
    writeFileSync(filePath, ipfixFile(datagrams));
    const output = await run(IPFIXDUMP, ["-i", filePath]);
    return finishDecode(parseIpfixDump(output));
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
}

/** The datagrams' IPFIX messages back to back: an IPFIX file (RFC 5655 §5). */
export function ipfixFile(datagrams: readonly ReceivedDatagram[]): Buffer {
  return Buffer.concat(datagrams.map((d) => d.payload));
}

// ipfixDump prints, per message, a "--- Message Header ---" block (export time, observation domain
// id, message length, sequence number), then "--- template record ---" / "--- options template
// record ---" blocks and "--- data record N ---" blocks whose lines read "(ID) [(S)] name : value".
function parseIpfixDump(output: string): ReferenceDecode {
  const decode = emptyDecode("ipfixDump");
  let message: ReferenceMessage | undefined;
  let record: { templateId: number; fields: Map<number, string>; named: Record<string, string> } | undefined;
  let inTemplate = false;
  const closeRecord = () => {
    if (!record || !message) return (record = undefined);
    const { fields } = record;
    if (fields.has(1) || fields.has(2) || fields.has(85) || fields.has(86)) {
      decode.flows.push(ipfixDumpFlow(fields, decode.messages.length - 1, record.templateId));
      message.flowRecords += 1;
    } else {
      decode.options.push(record.named);
      message.optionsRecords += 1;
    }
    record = undefined;
  };
  for (const line of output.split("\n")) {
    if (line.startsWith("--- Message Header ---")) {
      closeRecord();
      message = { version: 10, sequence: NaN, exportSeconds: NaN, domain: NaN, flowRecords: 0, optionsRecords: 0, templateIds: [] };
      decode.messages.push(message);
      inTemplate = false;
      continue;
    }
    if (/^--- (options )?template record ---/.test(line)) {
      closeRecord();
      inTemplate = true;
      continue;
    }
    if (/^--- data record \d+ ---/.test(line)) {
      closeRecord();
      inTemplate = false;
      record = { templateId: NaN, fields: new Map(), named: {} };
      continue;
    }
    if (!message) continue;
    let m: RegExpExecArray | null;
    if ((m = /export time: (\d{4}-\d{2}-\d{2} \d{2}:\d{2}:\d{2})\s+observation domain id: (\d+)/.exec(line))) {
      message.exportSeconds = Date.parse(`${m[1].replace(" ", "T")}Z`) / 1000;
      message.domain = Number(m[2]);
    } else if ((m = /sequence number: (\d+)/.exec(line))) {
      message.sequence = Number(m[1]);
    } else if ((m = /^\s*tid:\s*(\d+)/.exec(line))) {
      if (inTemplate) message.templateIds.push(Number(m[1]));
    } else if (record && (m = /^\s*count:\s*\d+\s+tid:\s*(\d+)/.exec(line))) {
      record.templateId = Number(m[1]);
    } else if (record && (m = /^\s*\((\d+)\)\s*(?:\(S\))?\s*(\S+)\s*: (.*)$/.exec(line))) {
      record.fields.set(Number(m[1]), m[3].trim());
      record.named[m[2]] = m[3].trim();
    }
  }
  closeRecord();
  return decode;
}

function ipfixDumpFlow(fields: Map<number, string>, message: number, templateId: number): ReferenceFlow {
  // Element ids from the IANA IPFIX registry (RFC 7012): 8/12 IPv4 addresses, 27/28 IPv6, 7/11 ports,
  // 4 protocolIdentifier, 1/2 octet/packetDeltaCount (85/86 the total-count forms), 32/139 icmpTypeCode,
  // 22/21 flowStart/EndSysUpTime (ms), 152/153 flowStart/EndMilliseconds.
  const get = (id: number) => fields.get(id);
  const start = get(22) !== undefined ? { clock: "sysUpTime" as const, millis: Number(get(22)) } : get(152) !== undefined ? { clock: "epoch" as const, millis: ipfixDumpDateMillis(get(152)!) } : undefined;
  const end = get(21) !== undefined ? { clock: "sysUpTime" as const, millis: Number(get(21)) } : get(153) !== undefined ? { clock: "epoch" as const, millis: ipfixDumpDateMillis(get(153)!) } : undefined;
  const icmp = get(32) ?? get(139);
  return {
    message,
    templateId,
    sourceAddress: canonicalAddress(required(get(8) ?? get(27), "source address")),
    destinationAddress: canonicalAddress(required(get(12) ?? get(28), "destination address")),
    protocol: Number(get(4)),
    sourcePort: Number(get(7) ?? 0),
    destinationPort: Number(get(11) ?? 0),
    icmpTypeCode: icmp === undefined ? undefined : Number(icmp),
    octets: Number(required(get(1) ?? get(85), "octets")),
    packets: Number(required(get(2) ?? get(86), "packets")),
    start,
    end,
  };
}

/** One data record as ipfixDump printed it: each field's element id, name and value text, in template order. */
export interface DumpedRecord {
  templateId: number;
  fields: { id: number; name: string; value: string }[];
}

/**
 * Every data record (flow and options records alike) of the datagrams as ipfixDump prints
 * it, without interpretation: what a converter from IPFIX to JSON would start from.
 */
export async function ipfixDumpDataRecords(datagrams: readonly ReceivedDatagram[]): Promise<DumpedRecord[]> {
  const dir = mkdtempSync(join(tmpdir(), "weir-ipfixdump-"));
  try {
    const filePath = join(dir, "export.ipfix");
    writeFileSync(filePath, ipfixFile(datagrams));
    const records: DumpedRecord[] = [];
    let record: DumpedRecord | undefined;
    for (const line of (await run(IPFIXDUMP, ["-i", filePath])).split("\n")) {
      let m: RegExpExecArray | null;
      if (/^--- /.test(line)) {
        record = /^--- data record \d+ ---/.test(line) ? { templateId: NaN, fields: [] } : undefined;
        if (record) records.push(record);
      } else if (record && (m = /^\s*count:\s*\d+\s+tid:\s*(\d+)/.exec(line))) {
        record.templateId = Number(m[1]);
      } else if (record && (m = /^\s*\((\d+)\)\s*(?:\(S\))?\s*(\S+)\s*: (.*)$/.exec(line))) {
        record.fields.push({ id: Number(m[1]), name: m[2], value: m[3].trim() });
      }
    }
    return records;
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
}

/** "2023-11-14 22:13:20.004" (ipfixDump prints UTC) → milliseconds since the epoch. */
function ipfixDumpDateMillis(value: string): number {
  const millis = Date.parse(`${value.trim().replace(" ", "T")}Z`);
  if (Number.isNaN(millis)) throw new Error(`unexpected ipfixDump date ${JSON.stringify(value)}`);
  return millis;
}

function emptyDecode(decoder: ReferenceDecode["decoder"]): ReferenceDecode {
  return { decoder, messages: [], flows: [], options: [], totals: { flows: 0, octets: 0, packets: 0 } };
}

function finishDecode(decode: ReferenceDecode): ReferenceDecode {
  decode.totals = decode.flows.reduce((sum, f) => ({ flows: sum.flows + 1, octets: sum.octets + f.octets, packets: sum.packets + f.packets }), { flows: 0, octets: 0, packets: 0 });
  for (const options of decode.options) {
    const init = options["cflow.sys_init_time"] ?? options["systemInitTimeMilliseconds"];
    if (init !== undefined) decode.systemInitMillis = init.includes("UTC") ? tsharkDateMillis(init) : ipfixDumpDateMillis(init);
  }
  return decode;
}

function run(file: string, args: string[]): Promise<string> {
  return new Promise((resolve, reject) => {
    // TZ=UTC: both tools print dates in local time unless told otherwise.
    execFile(file, args, { maxBuffer: 256 * 1024 * 1024, env: { ...process.env, TZ: "UTC", LC_ALL: "C" }, timeout: 60_000 }, (error, stdout, stderr) => {
      if (error) reject(new Error(`${file} ${args.join(" ")} failed: ${error.message}\n${stderr}`));
      else resolve(stdout);
    });
  });
}

function isObject(value: unknown): value is Record<string, unknown> {
  return typeof value === "object" && value !== null && !Array.isArray(value);
}

/** --no-duplicate-keys turns a repeated key into an array of its values. */
function asList(value: unknown): unknown[] {
  return Array.isArray(value) ? value : [value];
}

function text(value: unknown): string {
  const first = Array.isArray(value) ? value[0] : value;
  if (typeof first !== "string") throw new Error(`expected a string from tshark, got ${JSON.stringify(value)}`);
  return first;
}

function flatten(record: Record<string, unknown>): Record<string, string> {
  const out: Record<string, string> = {};
  for (const [name, value] of Object.entries(record)) {
    if (isObject(value)) Object.assign(out, flatten(value));
    else out[name] = text(value);
  }
  return out;
}

function required(value: string | undefined, what: string): string {
  if (value === undefined) throw new Error(`reference record without ${what}`);
  return value;
}
