import { createServer as createTcpServer, type Server as TcpServer, type Socket as TcpSocket } from "node:net";
import type { AddressInfo } from "node:net";
import { Worker } from "node:worker_threads";
import { coordinationKeyOf } from "~/auth/api-keys.server";
import type { Db } from "~/db/client.server";
import type { IngestSource } from "~/db/schema.server";
import { claimsFingerprint, EXPORTER_ROWS_KEPT_MS, loadClaimIndex, MAX_EXPORTER_ROWS } from "~/exporters/claims.server";
import type { ClaimIndex } from "~/exporters/claim-index";
import type { ReservoirManager, TenantSampling } from "~/ingest/manager.server";
import { KEPT_ROW_BYTES } from "~/ingest/kept-codec";
import { frameIpfixMessage } from "~/ipfix/framing";
import type { CollectTransport, ExporterStats } from "~/ipfix/types";
import type { Logger } from "~/logger.server";
import { parseAddress } from "~/net/address";
import { ChunkBuilder } from "./chunk";
import type { DecodeWorkerData, DecodeWorkerReply, DecodeWorkerRequest, DecodedGroup, UdpListen } from "./protocol";

export interface CollectionOptions {
  db: Db;
  manager: ReservoirManager;
  logger: Logger;
  /** Address the listeners bind to. */
  host: string;
  /** Listener ports: null turns one off, 0 asks the OS for a free port (tests). */
  ipfixUdpPort: number | null;
  netflowUdpPort: number | null;
  ipfixTcpPort: number | null;
  /** SO_RCVBUF asked for each UDP socket (the kernel may grant less). */
  receiveBufferBytes: number;
  /** A UDP template not refreshed for this long is forgotten (RFC 7011 §8.4). */
  templateLifetimeMs: number;
  /** A collector's buffered records are stored once this many have arrived … */
  flushRecords: number;
  /** … or this long after the first of them arrived. */
  flushMs: number;
  /** Records held for storage at most, all collectors together; beyond, new ones are dropped and counted. */
  maxBufferedRecords: number;
  /** How often exporter statistics are written to the `exporters` table (default 5 s). */
  statsIntervalMs?: number;
  /** How often the claims are checked for changes (default 2 s). */
  claimsIntervalMs?: number;
}

/** Ports the listeners are bound to (absent when off). */
export interface CollectionPorts {
  ipfixUdp?: number;
  netflowUdp?: number;
  ipfixTcp?: number;
}

/** Counters since start, for logs, health and tests. */
export interface CollectionCounters {
  datagrams: number;
  tcpMessages: number;
  tcpConnections: number;
  /** Messages decoded by the worker (dropped ones included: they are counted per exporter). */
  messagesDecoded: number;
  rowsDecoded: number;
  rowsUnclaimed: number;
  rowsStored: number;
  /** Rows dropped because more than maxBufferedRecords waited for storage. */
  rowsDroppedOverload: number;
  /** Rows lost because their batch failed to commit (logged). */
  rowsFailedToStore: number;
  /** Rows dropped for their times (too far ahead, before the floor, beyond retention); counted per collector too. */
  rowsTimeRefused: number;
  batches: number;
}

interface Buffered {
  tenantId: number;
  collectorId: number;
  transport: CollectTransport;
  parts: Uint8Array[];
  count: number;
  firstAt: number;
}

interface ExporterDelta {
  address: string;
  domain: number;
  transport: CollectTransport;
  messages: number;
  records: number;
  unusable: number;
  lost: number;
  waited: number;
  droppedWaiting: number;
  malformed: number;
  unclaimedMessages: number;
  firstSeen: number;
  lastSeen: number;
  latest?: ExporterStats;
  lastError: string | null;
}

const WORKER_URL = new URL("./decode-worker-entry.mjs", import.meta.url);
const CHUNK_BYTES = 256 * 1024;
const CHUNK_DELAY_MS = 5;
const MAX_TCP_CONNECTIONS = 1024;
const TENANT_CACHE_MS = 5000;
const DEFAULT_STATS_INTERVAL_MS = 5000;
const DEFAULT_CLAIMS_INTERVAL_MS = 2000;
const MAX_EXPORTER_KEYS = 10_000;

/**
 * Native collection: UDP listeners for IPFIX (RFC 7011) and NetFlow v9 (RFC 3954), a TCP
 * listener for IPFIX, one decode worker thread (the FlowDecoder and its per-session templates
 * live there), and the path from decoded rows to the reservoir manager.
 *
 * Exporters are not keys: a message feeds the collector whose claim matches its source
 * address and observation domain (app/exporters), and nobody otherwise — it is then counted
 * as unclaimed. Rows are buffered per (collector, transport) and stored as ordinary ingest
 * batches (one transaction each) after `flushRecords` records or `flushMs`, so what a crash
 * can lose is what was received and not yet flushed: UDP export has no acknowledgement.
 */
export class Collection {
  readonly ports: CollectionPorts = {};
  readonly counters: CollectionCounters = {
    datagrams: 0, tcpMessages: 0, tcpConnections: 0, messagesDecoded: 0, rowsDecoded: 0, rowsUnclaimed: 0, rowsStored: 0, rowsDroppedOverload: 0, rowsFailedToStore: 0, rowsTimeRefused: 0, batches: 0,
  };
  private tcpServer?: TcpServer;
  private readonly tcpSockets = new Set<TcpSocket>();
  private worker?: Worker;
  private readonly chunk = new ChunkBuilder();
  private chunkTimer?: NodeJS.Timeout;
  private nextId = 1;
  private readonly waitingDecodes = new Map<number, () => void>();
  private readonly waitingStats = new Map<number, (stats: ExporterStats[]) => void>();
  private readonly waitingClose = new Map<number, () => void>();
  private readonly buffers = new Map<string, Buffered>();
  private bufferedRecords = 0;
  private stores: Promise<void> = Promise.resolve();
  private claims!: ClaimIndex;
  private claimsPrint = "";
  private readonly addressBytes = new Map<string, Uint8Array | null>();
  private readonly tenants = new Map<number, { at: number; value: TenantSampling | null }>();
  private readonly collectorNames = new Map<number, { at: number; value: string | null }>();
  private readonly deltas = new Map<string, ExporterDelta>();
  private readonly lastStats = new Map<string, ExporterStats>();
  private lastStatsAt = Date.now();
  private timers: NodeJS.Timeout[] = [];
  private nextConnection = 1;
  private closed = false;
  private workerGone = false;

  private constructor(private readonly options: CollectionOptions) {}

  /** Starts the worker and the listeners; rejects (and releases everything) when a port cannot be bound. */
  static async start(options: CollectionOptions): Promise<Collection> {
    const collection = new Collection(options);
    try {
      // Without a listener there is nothing to decode: no thread is started. The worker binds the UDP sockets.
      if (options.ipfixUdpPort !== null || options.netflowUdpPort !== null || options.ipfixTcpPort !== null) await collection.startWorker();
      await collection.reloadClaims();
      await collection.listen();
    } catch (error) {
      await collection.close();
      throw error;
    }
    if (!collection.worker) return collection;
    const flushEvery = Math.max(10, Math.min(250, Math.floor(options.flushMs / 4)));
    collection.timers.push(
      setInterval(() => collection.flushDue(), flushEvery),
      setInterval(() => void collection.persistStats().catch((err: unknown) => options.logger.error({ err }, "collection: writing exporter statistics failed")), options.statsIntervalMs ?? DEFAULT_STATS_INTERVAL_MS),
      setInterval(() => void collection.reloadClaimsIfChanged().catch((err: unknown) => options.logger.error({ err }, "collection: reloading claims failed")), options.claimsIntervalMs ?? DEFAULT_CLAIMS_INTERVAL_MS),
    );
    for (const timer of collection.timers) timer.unref();
    return collection;
  }

  /**
   * For /healthz: the listeners' ports, whether the decode worker runs ("off" without
   * listeners), and the counters since start. Not healthy when listeners were asked for and
   * the worker has died: nothing received would be decoded.
   */
  health(): { healthy: boolean; worker: "running" | "stopped" | "off"; ports: CollectionPorts; bufferedRecords: number; counters: CollectionCounters } {
    const worker = !this.worker ? "off" : this.workerGone ? "stopped" : "running";
    return { healthy: worker !== "stopped" || this.closed, worker, ports: { ...this.ports }, bufferedRecords: this.bufferedRecords, counters: { ...this.counters } };
  }

  /** Reloads the exporter claims now (after a claim or release in this process). */
  async reloadClaims(): Promise<void> {
    const [index, print] = await Promise.all([loadClaimIndex(this.options.db), claimsFingerprint(this.options.db)]);
    this.claims = index;
    this.claimsPrint = print;
  }

  /**
   * Decodes everything received so far, stores every buffered record and writes the exporter
   * statistics: what a graceful shutdown does, and what tests call to read a settled state.
   */
  async drain(): Promise<void> {
    await this.decodePending(true);
    this.flushAll();
    await this.stores;
    await this.persistStats();
  }

  /** Stops the listeners, drains, and stops the worker. */
  async close(): Promise<void> {
    if (this.closed) return;
    this.closed = true;
    for (const timer of this.timers) clearInterval(timer);
    for (const socket of this.tcpSockets) socket.destroy();
    await new Promise<void>((resolve) => (this.tcpServer ? this.tcpServer.close(() => resolve()) : resolve()));
    if (this.worker) {
      try {
        const id = this.nextId++;
        const closed = new Promise<void>((resolve) => this.waitingClose.set(id, resolve));
        if (this.post({ type: "close", id })) await closed;
        await this.drain();
      } catch (error) {
        this.options.logger.error({ err: error }, "collection: draining at shutdown failed");
      }
      await this.worker.terminate();
    }
  }

  // ---- the decode worker ------------------------------------------------------------------

  private startWorker(): Promise<void> {
    const { host, ipfixUdpPort, netflowUdpPort, receiveBufferBytes, templateLifetimeMs } = this.options;
    const udp: UdpListen[] = [];
    if (ipfixUdpPort !== null) udp.push({ transport: "ipfix-udp", host, port: ipfixUdpPort, receiveBufferBytes });
    if (netflowUdpPort !== null) udp.push({ transport: "netflow9-udp", host, port: netflowUdpPort, receiveBufferBytes });
    const data: DecodeWorkerData = { templateLifetimeMs, udp };
    // The entry registers tsx itself; the parent's flags (vitest's, say) are no business of the worker's.
    const worker = new Worker(WORKER_URL, { execArgv: [], workerData: data });
    this.worker = worker;
    return new Promise((resolve, reject) => {
      let failure: Error | undefined;
      worker.once("error", (error) => reject(failure ?? error));
      worker.on("message", (reply: DecodeWorkerReply) => {
        switch (reply.type) {
          case "ready":
            worker.removeAllListeners("error");
            worker.on("error", (error) => this.options.logger.error({ err: error }, "collection: decode worker crashed"));
            for (const bound of reply.ports) {
              if (bound.transport === "ipfix-udp") this.ports.ipfixUdp = bound.port;
              else this.ports.netflowUdp = bound.port;
              this.options.logger.info({ transport: bound.transport, port: bound.port, receiveBufferBytes: bound.receiveBufferBytes }, "collection: listening");
            }
            resolve();
            break;
          case "listen-failed":
            failure = listenError(reply.code, reply.message, reply.transport, reply.port);
            break;
          case "decoded":
            this.counters.datagrams += reply.datagrams;
            this.takeDecoded(reply.rows, reply.groups);
            if (reply.id !== null) {
              this.waitingDecodes.get(reply.id)?.();
              this.waitingDecodes.delete(reply.id);
            }
            break;
          case "stats":
            this.waitingStats.get(reply.id)?.(reply.stats);
            this.waitingStats.delete(reply.id);
            break;
          case "closed":
            this.waitingClose.get(reply.id)?.();
            this.waitingClose.delete(reply.id);
            break;
          case "failure":
            this.options.logger.error({ failure: reply.message }, "collection: decode worker failed on a chunk");
            break;
        }
      });
      worker.on("exit", (code) => {
        this.workerGone = true;
        if (!this.closed) this.options.logger.error({ code }, "collection: decode worker exited; native collection stopped");
        for (const done of [...this.waitingDecodes.values(), ...this.waitingClose.values()]) done();
        this.waitingDecodes.clear();
        this.waitingClose.clear();
        for (const done of this.waitingStats.values()) done([]);
        this.waitingStats.clear();
      });
    });
  }

  /** Sends a request to the worker; false when there is none (no listener, or it died). */
  private post(request: DecodeWorkerRequest, transfer: ArrayBuffer[] = []): boolean {
    if (!this.worker || this.workerGone) return false;
    this.worker.postMessage(request, transfer);
    return true;
  }

  /** Sends what the chunk holds to the worker; resolves once it is decoded and routed. */
  private decodePending(barrier = false): Promise<void> {
    clearTimeout(this.chunkTimer);
    this.chunkTimer = undefined;
    // An empty chunk still makes the worker hand over the UDP rows it holds: a barrier for drain().
    if (!barrier && this.chunk.messages === 0) return Promise.resolve();
    const id = this.nextId++;
    const done = new Promise<void>((resolve) => this.waitingDecodes.set(id, resolve));
    const chunk = this.chunk.take();
    // Replies come back in order, so this one settles after every chunk sent before it.
    if (!this.post({ type: "chunk", id, chunk }, [chunk.buffer])) this.waitingDecodes.delete(id);
    return this.waitingDecodes.has(id) ? done : Promise.resolve();
  }

  /** A TCP-framed message: decoded in the worker with the next chunk. */
  private receive(transport: CollectTransport, session: string, exporter: string, message: Uint8Array): void {
    this.chunk.add(transport, session, exporter, Date.now(), message);
    if (this.chunk.byteLength >= CHUNK_BYTES) void this.decodePending();
    else this.chunkTimer ??= setTimeout(() => void this.decodePending(), CHUNK_DELAY_MS);
  }

  // ---- listeners -----------------------------------------------------------------------------

  private async listen(): Promise<void> {
    const { host, ipfixTcpPort } = this.options;
    if (ipfixTcpPort !== null) this.ports.ipfixTcp = await this.listenTcp(host, ipfixTcpPort);
  }

  private listenTcp(host: string, port: number): Promise<number> {
    const server = createTcpServer((socket) => this.acceptTcp(socket));
    server.maxConnections = MAX_TCP_CONNECTIONS;
    this.tcpServer = server;
    return new Promise((resolve, reject) => {
      server.once("error", (error) => reject(listenError((error as { code?: string }).code ?? null, error.message, "ipfix-tcp", port)));
      server.listen(port, host, () => {
        server.removeAllListeners("error");
        server.on("error", (error) => this.options.logger.error({ err: error }, "collection: TCP listener error"));
        const bound = (server.address() as AddressInfo).port;
        this.options.logger.info({ transport: "ipfix-tcp", port: bound }, "collection: listening");
        resolve(bound);
      });
    });
  }

  /**
   * One IPFIX transport session per TCP connection (RFC 7011 §10.4): the stream is cut into
   * messages by their length field. A stream that stops making sense cannot be resynchronised,
   * so it is closed and counted as malformed for that exporter.
   */
  private acceptTcp(socket: TcpSocket): void {
    this.counters.tcpConnections++;
    this.tcpSockets.add(socket);
    const exporter = unmapped(socket.remoteAddress ?? "unknown");
    const session = `t${this.nextConnection++}:${exporter}:${socket.remotePort ?? 0}`;
    let pending = Buffer.alloc(0);
    socket.setKeepAlive(true, 60_000);
    socket.on("data", (data) => {
      pending = pending.length === 0 ? data : Buffer.concat([pending, data]);
      for (;;) {
        const framing = frameIpfixMessage(pending);
        if (framing.status === "incomplete") break;
        if (framing.status === "malformed") {
          this.countMalformed(exporter, pending.length >= 16 ? pending.readUInt32BE(12) : -1, "ipfix-tcp", `TCP stream: ${framing.reason}; connection closed`);
          socket.destroy();
          return;
        }
        this.counters.tcpMessages++;
        this.receive("ipfix-tcp", session, exporter, pending.subarray(0, framing.length));
        pending = pending.subarray(framing.length);
      }
    });
    socket.on("error", () => socket.destroy());
    socket.on("close", () => {
      this.tcpSockets.delete(socket);
      // After what the session sent: messages and this request travel to the worker in order.
      if (this.chunk.messages > 0) void this.decodePending();
      this.post({ type: "end", session });
    });
  }

  // ---- from decoded rows to ingest batches --------------------------------------------------

  private takeDecoded(rows: Uint8Array, groups: DecodedGroup[]): void {
    let at = 0;
    for (const group of groups) {
      const part = rows.subarray(at * KEPT_ROW_BYTES, (at + group.rows) * KEPT_ROW_BYTES);
      at += group.rows;
      this.counters.messagesDecoded += group.messages;
      this.counters.rowsDecoded += group.rows;
      const delta = this.delta(group.exporter, group.domain, group.transport);
      if (delta) delta.waited += group.waited;
      const address = this.address(group.exporter);
      const claim = address === null || group.domain < 0 ? null : this.claims.resolve(address, group.domain);
      if (claim === null) {
        this.counters.rowsUnclaimed += group.rows;
        if (delta && group.domain >= 0) delta.unclaimedMessages += group.messages;
        continue;
      }
      if (group.rows === 0) continue;
      if (this.bufferedRecords + group.rows > this.options.maxBufferedRecords) {
        this.counters.rowsDroppedOverload += group.rows;
        if (delta) delta.lastError = `storage fell behind: ${group.rows} records dropped (more than COLLECT_MAX_BUFFERED_RECORDS waited to be stored)`;
        continue;
      }
      const key = `${claim.collectorId}:${group.transport}`;
      let buffer = this.buffers.get(key);
      if (!buffer) {
        buffer = { tenantId: claim.tenantId, collectorId: claim.collectorId, transport: group.transport, parts: [], count: 0, firstAt: Date.now() };
        this.buffers.set(key, buffer);
      }
      buffer.parts.push(part);
      buffer.count += group.rows;
      this.bufferedRecords += group.rows;
      if (buffer.count >= this.options.flushRecords) this.flush(key, buffer);
    }
  }

  private flushDue(): void {
    const now = Date.now();
    for (const [key, buffer] of this.buffers) if (now - buffer.firstAt >= this.options.flushMs) this.flush(key, buffer);
  }

  private flushAll(): void {
    for (const [key, buffer] of this.buffers) this.flush(key, buffer);
  }

  private flush(key: string, buffer: Buffered): void {
    this.buffers.delete(key);
    const rows = new Uint8Array(buffer.count * KEPT_ROW_BYTES);
    let at = 0;
    for (const part of buffer.parts) {
      rows.set(part, at);
      at += part.byteLength;
    }
    const count = buffer.count;
    this.stores = this.stores.then(async () => {
      try {
        const [tenant, collector] = await Promise.all([this.tenant(buffer.tenantId), this.collectorName(buffer.collectorId)]);
        if (tenant === null || collector === null) throw new Error(`tenant ${buffer.tenantId} or collector ${buffer.collectorId} no longer exists`);
        const answer = await this.options.manager.ingest({
          tenant,
          collector: { id: buffer.collectorId, name: collector },
          records: { rows, count },
          // The manager's clock: flow times are checked against it, and records refused for them dropped and counted.
          receivedAt: this.options.manager.now(),
          source: buffer.transport as IngestSource,
        });
        this.counters.rowsStored += answer.accepted;
        this.counters.rowsTimeRefused += count - answer.accepted;
        this.counters.batches++;
      } catch (error) {
        this.counters.rowsFailedToStore += count;
        this.options.logger.error({ err: error, collectorId: buffer.collectorId, records: count }, "collection: a batch from the listeners could not be stored");
      } finally {
        this.bufferedRecords -= count;
      }
    });
  }

  private async tenant(id: number): Promise<TenantSampling | null> {
    const cached = this.tenants.get(id);
    if (cached && Date.now() - cached.at < TENANT_CACHE_MS) return cached.value;
    const found = await this.options.db.$client.execute({
      sql: "SELECT id, sample_size, window_seconds, weight_attribute, coordinated, coordination_secret, retention_days, hourly_retention_days FROM tenants WHERE id = ?",
      args: [id],
    });
    const row = found.rows[0];
    const value: TenantSampling | null = row
      ? {
          id: Number(row.id),
          sampleSize: Number(row.sample_size),
          windowSeconds: Number(row.window_seconds),
          weightAttribute: row.weight_attribute === "packets" ? "packets" : "bytes",
          coordinationKey: coordinationKeyOf({ coordinated: Boolean(row.coordinated), coordinationSecret: row.coordination_secret === null ? null : String(row.coordination_secret) }),
          retentionDays: Number(row.retention_days),
          hourlyRetentionDays: Number(row.hourly_retention_days),
        }
      : null;
    this.tenants.set(id, { at: Date.now(), value });
    return value;
  }

  private async collectorName(id: number): Promise<string | null> {
    const cached = this.collectorNames.get(id);
    if (cached && Date.now() - cached.at < TENANT_CACHE_MS) return cached.value;
    const found = await this.options.db.$client.execute({ sql: "SELECT name FROM collectors WHERE id = ?", args: [id] });
    const value = found.rows[0] ? String(found.rows[0].name) : null;
    this.collectorNames.set(id, { at: Date.now(), value });
    return value;
  }

  private address(exporter: string): Uint8Array | null {
    let bytes = this.addressBytes.get(exporter);
    if (bytes === undefined) {
      try {
        bytes = parseAddress(exporter);
      } catch {
        bytes = null;
      }
      if (this.addressBytes.size >= MAX_EXPORTER_KEYS) this.addressBytes.clear();
      this.addressBytes.set(exporter, bytes);
    }
    return bytes;
  }

  private async reloadClaimsIfChanged(): Promise<void> {
    if ((await claimsFingerprint(this.options.db)) !== this.claimsPrint) await this.reloadClaims();
  }

  // ---- exporter statistics -------------------------------------------------------------------

  private delta(address: string, domain: number, transport: CollectTransport): ExporterDelta | undefined {
    const key = `${address}|${domain}|${transport}`;
    let delta = this.deltas.get(key);
    if (!delta) {
      // Bounded: spoofed sources cannot grow this without limit between two writes.
      if (this.deltas.size >= MAX_EXPORTER_KEYS) return undefined;
      const now = Date.now();
      delta = { address, domain, transport, messages: 0, records: 0, unusable: 0, lost: 0, waited: 0, droppedWaiting: 0, malformed: 0, unclaimedMessages: 0, firstSeen: now, lastSeen: now, lastError: null };
      this.deltas.set(key, delta);
    }
    return delta;
  }

  private countMalformed(address: string, domain: number, transport: CollectTransport, reason: string): void {
    const delta = this.delta(address, domain, transport);
    if (!delta) return;
    delta.malformed++;
    delta.messages++;
    delta.lastSeen = Date.now();
    delta.lastError = reason;
  }

  private workerStats(): Promise<ExporterStats[]> {
    const id = this.nextId++;
    const answer = new Promise<ExporterStats[]>((resolve) => this.waitingStats.set(id, resolve));
    if (!this.post({ type: "stats", id })) {
      this.waitingStats.delete(id);
      return Promise.resolve([]);
    }
    return answer;
  }

  /**
   * Adds what changed per (exporter, domain, transport) since the last write to the
   * `exporters` table. The decoder's counters are per session and start again when a session
   * is new, so only their growth is added.
   */
  async persistStats(): Promise<void> {
    const stats = await this.workerStats();
    const now = Date.now();
    const elapsedSeconds = Math.max(0.001, (now - this.lastStatsAt) / 1000);
    this.lastStatsAt = now;
    const live = new Set<string>();
    for (const s of stats) {
      const sessionKey = `${s.session}|${s.domain}`;
      live.add(sessionKey);
      const before = this.lastStats.get(sessionKey);
      this.lastStats.set(sessionKey, s);
      const grew = (now: number, then: number | undefined) => (then === undefined || now < then ? now : now - then);
      const delta = this.delta(s.exporter, s.domain, s.transport);
      if (!delta) continue;
      delta.messages += grew(s.messages, before?.messages);
      delta.records += grew(s.records, before?.records);
      delta.unusable += grew(s.unusable, before?.unusable);
      delta.lost += grew(s.lost, before?.lost);
      delta.droppedWaiting += grew(s.droppedWaiting, before?.droppedWaiting);
      delta.malformed += grew(s.malformed, before?.malformed);
      delta.firstSeen = Math.min(delta.firstSeen, s.firstSeen);
      delta.lastSeen = Math.max(delta.lastSeen, s.lastSeen);
      if (!delta.latest || s.lastSeen >= delta.latest.lastSeen) delta.latest = s;
      if (s.lastError !== null && (delta.lastError === null || s.lastSeen >= delta.lastSeen)) delta.lastError = s.lastError;
    }
    for (const key of this.lastStats.keys()) if (!live.has(key)) this.lastStats.delete(key);
    const changes = [...this.deltas.values()];
    this.deltas.clear();
    const quiet = { sql: "UPDATE exporters SET records_per_second = 0 WHERE records_per_second > 0 AND last_seen_at < ?", args: [now - 2 * elapsedSeconds * 1000] };
    // Bounded: exporters long silent are forgotten, and spoofed sources cannot grow the table past its cap.
    const prune = [
      { sql: "DELETE FROM exporters WHERE last_seen_at < ?", args: [now - EXPORTER_ROWS_KEPT_MS] },
      { sql: "DELETE FROM exporters WHERE id NOT IN (SELECT id FROM exporters ORDER BY last_seen_at DESC LIMIT ?)", args: [MAX_EXPORTER_ROWS] },
    ];
    await this.options.db.$client.batch(
      [quiet, ...prune, ...changes.map((d) => ({
        sql: `INSERT INTO exporters (address, domain_id, transport, first_seen_at, last_seen_at, messages, records, lost, lost_unit, waiting, dropped_waiting, malformed, unusable,
                unclaimed_messages, records_per_second, sampling_interval, templates, enterprise_elements, last_error)
              VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15, ?16, coalesce(?17, '[]'), coalesce(?18, '[]'), ?19)
              ON CONFLICT (address, domain_id, transport) DO UPDATE SET
                first_seen_at = min(first_seen_at, excluded.first_seen_at), last_seen_at = max(last_seen_at, excluded.last_seen_at),
                messages = messages + excluded.messages, records = records + excluded.records, lost = lost + excluded.lost,
                lost_unit = excluded.lost_unit, waiting = waiting + excluded.waiting, dropped_waiting = dropped_waiting + excluded.dropped_waiting,
                malformed = malformed + excluded.malformed, unusable = unusable + excluded.unusable,
                unclaimed_messages = unclaimed_messages + excluded.unclaimed_messages, records_per_second = excluded.records_per_second,
                sampling_interval = coalesce(?16, sampling_interval), templates = coalesce(?17, templates),
                enterprise_elements = coalesce(?18, enterprise_elements), last_error = coalesce(?19, last_error)`,
        args: [
          d.address, d.domain, d.transport, d.firstSeen, d.lastSeen, d.messages, d.records, d.lost,
          d.latest?.lostUnit ?? (d.transport === "netflow9-udp" ? "packets" : "records"), d.waited, d.droppedWaiting, d.malformed, d.unusable,
          d.unclaimedMessages, d.records / elapsedSeconds, d.latest?.samplingInterval ?? null,
          d.latest ? JSON.stringify(d.latest.templates) : null, d.latest ? JSON.stringify(d.latest.enterpriseElements) : null, d.lastError,
        ],
      }))],
      "write",
    );
  }
}

/** "::ffff:192.0.2.1" (a dual-stack socket's view of an IPv4 sender) as "192.0.2.1". */
function unmapped(address: string): string {
  return address.startsWith("::ffff:") && address.includes(".") ? address.slice(7) : address;
}

function listenError(code: string | null, message: string, transport: CollectTransport, port: number): Error {
  const variable = transport === "ipfix-tcp" ? "IPFIX_TCP_PORT" : transport === "ipfix-udp" ? "IPFIX_UDP_PORT" : "NETFLOW_UDP_PORT";
  if (code === "EADDRINUSE") return new Error(`${variable}: port ${port} is already in use; choose another port, or 0 to turn this listener off`);
  if (code === "EACCES") return new Error(`${variable}: not allowed to listen on port ${port} (ports below 1024 need privileges); choose another port, or 0 to turn this listener off`);
  return new Error(`${variable}: cannot listen on port ${port}: ${message}`);
}
