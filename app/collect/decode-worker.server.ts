// The decode worker (collection.server.ts). One thread owns the FlowDecoder, whose template
// caches and sequence state belong to transport sessions, so every message of a session
// reaches the same decoder. It also owns the UDP sockets: datagrams are read and decoded
// here, away from the main thread's SQLite commits, so the kernel's receive buffer is
// drained however busy storage is. Decoded rows go to the main thread by transfer, grouped
// by (session, observation domain), every few milliseconds.
import { createSocket, type Socket } from "node:dgram";
import type { AddressInfo } from "node:net";
import { parentPort, workerData } from "node:worker_threads";
import { FlowDecoder } from "~/ipfix/decoder";
import { RowWriter } from "~/ipfix/row-writer";
import type { CollectTransport } from "~/ipfix/types";
import { readChunk } from "./chunk";
import type { DecodeWorkerData, DecodeWorkerReply, DecodeWorkerRequest, DecodedGroup, UdpListen } from "./protocol";

const port = parentPort!;
const { templateLifetimeMs, udp } = workerData as DecodeWorkerData;
const decoder = new FlowDecoder({ templateLifetimeMs });
const writer = new RowWriter();
// Rows go to the main thread after this many, or this long after the first: one post per
// datagram would cost more than decoding it.
const POST_ROWS = 8192;
const POST_DELAY_MS = 5;

let groups: DecodedGroup[] = [];
let last: DecodedGroup | undefined;
let datagrams = 0;
let postTimer: NodeJS.Timeout | undefined;
const sockets: Socket[] = [];

function reply(message: DecodeWorkerReply, transfer: ArrayBuffer[] = []): void {
  port.postMessage(message, transfer);
}

function decodeOne(transport: CollectTransport, session: string, exporter: string, receivedAt: number, message: Uint8Array): void {
  const before = writer.count;
  const outcome = decoder.decode({ session, exporter, transport, receivedAt }, message, writer);
  const domain = outcome.domain ?? -1;
  const rows = writer.count - before;
  const waited = outcome.status === "decoded" ? outcome.waiting : 0;
  if (last && last.session === session && last.domain === domain) {
    last.rows += rows;
    last.messages += 1;
    last.waited += waited;
  } else {
    last = { session, exporter, transport, domain, rows, messages: 1, waited };
    groups.push(last);
  }
}

function postDecoded(id: number | null): void {
  clearTimeout(postTimer);
  postTimer = undefined;
  const packed = writer.take();
  reply({ type: "decoded", id, rows: packed.rows, count: packed.count, groups, datagrams }, [packed.rows.buffer]);
  groups = [];
  last = undefined;
  datagrams = 0;
}

/** "::ffff:192.0.2.1" (a dual-stack socket's view of an IPv4 sender) as "192.0.2.1". */
function unmapped(address: string): string {
  return address.startsWith("::ffff:") && address.includes(".") ? address.slice(7) : address;
}

function listen(spec: UdpListen): Promise<{ transport: UdpListen["transport"]; port: number; receiveBufferBytes: number }> {
  const socket = createSocket({ type: spec.host.includes(":") ? "udp6" : "udp4", recvBufferSize: spec.receiveBufferBytes });
  sockets.push(socket);
  return new Promise((resolve, reject) => {
    socket.once("error", reject);
    socket.bind(spec.port, spec.host, () => {
      socket.removeAllListeners("error");
      socket.on("error", () => undefined); // a send error of a peer; the socket stays open
      const bound = (socket.address() as AddressInfo).port;
      socket.on("message", (message, remote) => {
        datagrams++;
        const exporter = unmapped(remote.address);
        decodeOne(spec.transport, `u${bound}:${exporter}:${remote.port}`, exporter, Date.now(), message);
        if (writer.count >= POST_ROWS) postDecoded(null);
        else postTimer ??= setTimeout(() => postDecoded(null), POST_DELAY_MS);
      });
      resolve({ transport: spec.transport, port: bound, receiveBufferBytes: socket.getRecvBufferSize() });
    });
  });
}

port.on("message", (request: DecodeWorkerRequest) => {
  try {
    if (request.type === "chunk") {
      readChunk(request.chunk, (m) => decodeOne(m.transport, m.session, m.exporter, m.receivedAt, m.message));
      postDecoded(request.id);
    } else if (request.type === "end") {
      decoder.endSession(request.session);
    } else if (request.type === "stats") {
      reply({ type: "stats", id: request.id, stats: decoder.exporterStats() });
    } else if (request.type === "close") {
      Promise.all(sockets.map((s) => new Promise<void>((resolve) => s.close(() => resolve())))).then(() => {
        postDecoded(null);
        reply({ type: "closed", id: request.id });
      });
    }
  } catch (error) {
    // The decoder never throws on input; this is a fault of ours. Say so and go on.
    reply({ type: "failure", message: error instanceof Error ? (error.stack ?? error.message) : String(error) });
  }
});

const ports: { transport: UdpListen["transport"]; port: number; receiveBufferBytes: number }[] = [];
for (const spec of udp) {
  try {
    ports.push(await listen(spec));
  } catch (error) {
    const code = (error as { code?: string }).code ?? null;
    reply({ type: "listen-failed", transport: spec.transport, port: spec.port, code, message: (error as Error).message });
    throw error;
  }
}
reply({ type: "ready", ports });
