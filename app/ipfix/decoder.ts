/**
 * The IPFIX (RFC 7011) and NetFlow v9 (RFC 3954) decoder: messages in, packed flow rows out
 * (the layout of app/ingest/kept-codec.ts), the same rows JSON ingest produces.
 *
 * State is kept per transport session and observation domain (RFC 7011 §2, §8): templates
 * (with withdrawal, redefinition and, over UDP, expiry), data sets waiting for their template,
 * packet-sampling announcements, the system init time, sequence numbers and statistics.
 *
 * A message is decoded as a whole or not at all: set headers are checked before any row is
 * written, template changes, waiting sets and announcements are staged and applied only when
 * the whole message proved sound, and rows already written are taken back (`truncate`) when a
 * later check fails. Nothing throws out of `decode`, and every loop advances by at least one
 * octet, so no input can stall it. Everything kept is bounded.
 *
 * Pure module: no I/O.
 */
import type { CollectTransport, DecoderOptions, ExporterStats, MessageOutcome, MessageSource, TemplateSummary } from "./types.ts";
import { decodeFlowRecords, decodeOptionsRecords, RecordContext } from "./records.ts";
import type { RowWriter } from "./row-writer.ts";
import { PACKETS, PREVIOUS_RECORDS, SequenceTracker } from "./sequence.ts";
import {
  parseIpfixTemplateSet, parseV9OptionsFlowSet, parseV9TemplateFlowSet, type TemplateAction, type TemplateDefinition,
} from "./templates.ts";

export { frameIpfixMessage, type Framing } from "./framing.ts";
export { RowWriter } from "./row-writer.ts";

/** Templates kept per (session, domain); a new one beyond this is refused (the ids are 256–65535). */
export const MAX_TEMPLATES_PER_DOMAIN = 1024;
/** Observation domains kept per session; messages of further domains are dropped. */
export const MAX_DOMAINS_PER_SESSION = 1024;
/** Distinct enterprise-specific elements counted per (session, domain); further ones are not listed. */
export const MAX_ENTERPRISE_ELEMENTS = 256;

const DEFAULTS = { maxWaitingSets: 64, maxWaitingBytes: 256 * 1024, waitingLifetimeMs: 60_000, maxSessions: 10_000 };

interface Template extends TemplateDefinition {
  refreshedAt: number;
}

/** A Data Set held for a template not (yet) known, with what its records need from its message. */
interface Waiting {
  templateId: number;
  body: Uint8Array;
  receivedAt: number;
  exportSeconds: number;
  sysUptime: number;
  v9: boolean;
}

class DomainState {
  templates = new Map<number, Template>();
  waiting: Waiting[] = [];
  waitingBytes = 0;
  readonly sequence: SequenceTracker;
  scaleNum = 1;
  scaleDen = 1;
  samplingInterval: number | null = null;
  initTimeMs = Number.NaN;
  enterprise = new Map<number, { enterprise: number; id: number; count: number }>();
  version: 9 | 10 | null;
  firstSeen: number;
  lastSeen: number;
  messages = 0;
  records = 0;
  unusable = 0;
  lost = 0;
  droppedWaiting = 0;
  malformed = 0;
  lastError: string | null = null;

  constructor(readonly domain: number, version: 9 | 10 | null, now: number) {
    this.version = version;
    this.firstSeen = now;
    this.lastSeen = now;
    this.sequence = new SequenceTracker(version === 9 ? PACKETS : PREVIOUS_RECORDS);
  }
}

class SessionState {
  domains = new Map<number, DomainState>();
  constructor(public exporter: string, public transport: CollectTransport) {}
}

/** What the sets of one message would change, applied only if the message proves sound. */
class Staged {
  templates: Map<number, Template | null> | null = null;
  withdrewAllData = false;
  withdrewAllOptions = false;
  waiting: Waiting[] = [];
  /** [template, records in the set] for the enterprise-element counts. */
  enterpriseCounts: [Template, number][] = [];
  notes: string[] = [];

  reset(): void {
    this.templates = null;
    this.withdrewAllData = false;
    this.withdrewAllOptions = false;
    this.waiting.length = 0;
    this.enterpriseCounts.length = 0;
    this.notes.length = 0;
  }
}

function u16(msg: Uint8Array, at: number): number {
  return (msg[at] << 8) | msg[at + 1];
}

function u32(msg: Uint8Array, at: number): number {
  return msg[at] * 16777216 + ((msg[at + 1] << 16) | (msg[at + 2] << 8) | msg[at + 3]);
}

class Malformed {
  constructor(readonly reason: string) {}
}

export class FlowDecoder {
  private readonly templateLifetimeMs: number | null;
  private readonly maxWaitingSets: number;
  private readonly maxWaitingBytes: number;
  private readonly waitingLifetimeMs: number;
  private readonly maxSessions: number;
  private readonly sessions = new Map<string, SessionState>();
  private readonly ctx = new RecordContext();
  private readonly staged = new Staged();

  constructor(options: DecoderOptions) {
    this.templateLifetimeMs = options.templateLifetimeMs;
    this.maxWaitingSets = Math.max(0, options.maxWaitingSets ?? DEFAULTS.maxWaitingSets);
    this.maxWaitingBytes = Math.max(0, options.maxWaitingBytes ?? DEFAULTS.maxWaitingBytes);
    this.waitingLifetimeMs = Math.max(0, options.waitingLifetimeMs ?? DEFAULTS.waitingLifetimeMs);
    this.maxSessions = Math.max(1, options.maxSessions ?? DEFAULTS.maxSessions);
  }

  /**
   * Decodes one IPFIX message or NetFlow v9 export packet (exactly one: for TCP streams and
   * files, cut them with `frameIpfixMessage`), appending its flow rows to `out` contiguously.
   * Never throws: a malformed message is dropped whole, its reason in the outcome.
   */
  decode(source: MessageSource, message: Uint8Array, out: RowWriter): MessageOutcome {
    const mark = out.count;
    try {
      return this.decodeMessage(source, message, out, mark);
    } catch (error) {
      // Unreachable by design; the promise that decode never throws does not rest on that.
      out.truncate(Math.min(mark, out.count));
      this.staged.reset();
      const reason = `internal decoder error: ${error instanceof Error ? error.message : String(error)}`;
      const state = this.domainFor(this.sessionFor(source), -1, null, source.receivedAt);
      if (state !== null) this.noteMalformed(state, reason);
      return { status: "dropped", version: null, domain: null, reason };
    }
  }

  /** Everything known per (session, observation domain), for the console and metrics. */
  exporterStats(): ExporterStats[] {
    const out: ExporterStats[] = [];
    for (const [session, s] of this.sessions) {
      for (const d of s.domains.values()) {
        const templates: TemplateSummary[] = [];
        for (const t of d.templates.values()) {
          if (this.expired(s.transport, t, d.lastSeen)) continue;
          templates.push({ id: t.id, options: t.options, fields: [...t.names], refreshedAt: t.refreshedAt });
        }
        templates.sort((a, b) => a.id - b.id);
        out.push({
          session,
          exporter: s.exporter,
          transport: s.transport,
          domain: d.domain,
          version: d.version,
          firstSeen: d.firstSeen,
          lastSeen: d.lastSeen,
          messages: d.messages,
          records: d.records,
          unusable: d.unusable,
          lost: d.lost,
          lostUnit: d.sequence.unit,
          waiting: d.waiting.length,
          droppedWaiting: d.droppedWaiting,
          malformed: d.malformed,
          lastError: d.lastError,
          samplingInterval: d.samplingInterval,
          templates,
          enterpriseElements: [...d.enterprise.values()].map((e) => ({ ...e })),
        });
      }
    }
    return out;
  }

  /**
   * The transport session ended (a TCP connection closed, a file was read): its templates are
   * withdrawn (RFC 7011 §8.1) and the data sets still waiting for one are dropped and counted.
   * Its statistics stay until the session is forgotten as least recently used.
   */
  endSession(session: string): void {
    const s = this.sessions.get(session);
    if (s === undefined) return;
    for (const d of s.domains.values()) {
      d.droppedWaiting += d.waiting.length;
      d.waiting = [];
      d.waitingBytes = 0;
      d.templates.clear();
      d.sequence.reset();
    }
  }

  // ---- sessions and domains ---------------------------------------------------------------

  private sessionFor(source: MessageSource): SessionState {
    let s = this.sessions.get(source.session);
    if (s !== undefined) {
      // Least recently used order: Map keeps insertion order, so move it to the end.
      this.sessions.delete(source.session);
      this.sessions.set(source.session, s);
      s.exporter = source.exporter;
      s.transport = source.transport;
      return s;
    }
    s = new SessionState(source.exporter, source.transport);
    this.sessions.set(source.session, s);
    if (this.sessions.size > this.maxSessions) {
      const oldest = this.sessions.keys().next().value as string;
      this.sessions.delete(oldest);
    }
    return s;
  }

  private domainFor(s: SessionState, domain: number, version: 9 | 10 | null, now: number): DomainState | null {
    let d = s.domains.get(domain);
    if (d === undefined) {
      if (s.domains.size >= MAX_DOMAINS_PER_SESSION) return null;
      d = new DomainState(domain, version, now);
      s.domains.set(domain, d);
    }
    if (version !== null) d.version = version;
    d.lastSeen = Math.max(d.lastSeen, now);
    return d;
  }

  private noteMalformed(d: DomainState, reason: string): void {
    d.malformed++;
    d.lastError = reason;
  }

  private expired(transport: CollectTransport, t: Template, now: number): boolean {
    const udp = transport === "ipfix-udp" || transport === "netflow9-udp";
    return udp && this.templateLifetimeMs !== null && now - t.refreshedAt > this.templateLifetimeMs;
  }

  // ---- one message ------------------------------------------------------------------------

  private dropEarly(s: SessionState, now: number, version: 9 | 10 | null, reason: string): MessageOutcome {
    const d = this.domainFor(s, -1, version, now);
    if (d !== null) {
      d.messages++;
      this.noteMalformed(d, reason);
    }
    return { status: "dropped", version, domain: null, reason };
  }

  private decodeMessage(source: MessageSource, msg: Uint8Array, out: RowWriter, mark: number): MessageOutcome {
    const s = this.sessionFor(source);
    const now = source.receivedAt;
    const n = msg.length;
    if (n < 4) return this.dropEarly(s, now, null, `${n} octets are too few for a message header`);
    const versionField = u16(msg, 0);
    let version: 9 | 10;
    let sequence: number;
    let domainId: number;
    let setsStart: number;
    const ctx = this.ctx;
    ctx.reset();
    if (versionField === 10) {
      version = 10;
      if (n < 16) return this.dropEarly(s, now, 10, `an IPFIX message header is 16 octets; only ${n} arrived`);
      const length = u16(msg, 2);
      ctx.exportSeconds = u32(msg, 4);
      sequence = u32(msg, 8);
      domainId = u32(msg, 12);
      setsStart = 16;
      ctx.v9 = false;
      ctx.sysUptime = 0;
      if (length !== n) {
        const d = this.domainFor(s, domainId, 10, now);
        const reason = `the message header says ${length} octets but ${n} arrived (RFC 7011 §3.1)`;
        if (d === null) return this.dropEarly(s, now, 10, reason);
        d.messages++;
        return this.fail(d, out, mark, sequence, -1, reason);
      }
    } else if (versionField === 9) {
      version = 9;
      if (n < 20) return this.dropEarly(s, now, 9, `a NetFlow v9 packet header is 20 octets; only ${n} arrived`);
      ctx.sysUptime = u32(msg, 4);
      ctx.exportSeconds = u32(msg, 8);
      sequence = u32(msg, 12);
      domainId = u32(msg, 16);
      setsStart = 20;
      ctx.v9 = true;
    } else {
      return this.dropEarly(s, now, null, `version ${versionField} is neither IPFIX (10) nor NetFlow v9 (9)`);
    }
    const d = this.domainFor(s, domainId, version, now);
    if (d === null) {
      return this.dropEarly(s, now, version, `more than ${MAX_DOMAINS_PER_SESSION} observation domains in one session; domain ${domainId} is not kept`);
    }
    d.messages++;
    const uptime = version === 9 ? ctx.sysUptime : -1;
    this.expireWaiting(d, now);

    // Pass 1: every set header must fit before anything is decoded (RFC 7011 §3.3.2, RFC 3954 §5).
    const what = version === 10 ? "set" : "FlowSet";
    let p = setsStart;
    let index = 0;
    while (n - p >= 4) {
      const length = u16(msg, p + 2);
      index++;
      if (length < 4) return this.fail(d, out, mark, sequence, uptime, `${what} ${index} (id ${u16(msg, p)}) has length ${length}; a ${what} header alone is 4 octets`);
      if (p + length > n) {
        return this.fail(d, out, mark, sequence, uptime, `${what} ${index} (id ${u16(msg, p)}) of length ${length} runs past the message end (${n - p} octets left)`);
      }
      p += length;
    }
    // IPFIX sets fill the message exactly; a NetFlow v9 packet has no length, and a few
    // exporters pad the datagram, so fewer than 4 trailing octets are let through there.
    if (p !== n && version === 10) return this.fail(d, out, mark, sequence, uptime, `${n - p} octets after the last set are too few for a set`);

    // Pass 2: sets in order (template changes take effect in the order they appear, RFC 7011 §8.1).
    const staged = this.staged;
    staged.reset();
    ctx.initTimeMs = d.initTimeMs;
    ctx.scaleNum = d.scaleNum;
    ctx.scaleDen = d.scaleDen;
    const udp = s.transport === "ipfix-udp" || s.transport === "netflow9-udp";
    p = setsStart;
    while (n - p >= 4) {
      const setId = u16(msg, p);
      const end = p + u16(msg, p + 2);
      const body = p + 4;
      p = end;
      if (setId >= 256) {
        const t = this.lookup(s, d, setId, now);
        if (t === undefined) {
          staged.waiting.push({ templateId: setId, body: msg.subarray(body, end), receivedAt: now, exportSeconds: ctx.exportSeconds, sysUptime: ctx.sysUptime, v9: ctx.v9 });
          continue;
        }
        const before = ctx.records;
        if (t.options) {
          if (!decodeOptionsRecords(t.plan, msg, body, end, ctx)) return this.fail(d, out, mark, sequence, uptime, `data set for options template ${setId}: ${ctx.error}`);
          this.takeAnnouncements(ctx);
        } else if (!decodeFlowRecords(t.plan, msg, body, end, ctx, out)) {
          return this.fail(d, out, mark, sequence, uptime, `data set for template ${setId}: ${ctx.error}`);
        }
        if (t.plan.enterpriseFields.length > 0) staged.enterpriseCounts.push([t, ctx.records - before]);
        continue;
      }
      let actions: TemplateAction[] | string | null = null;
      if (version === 10 && (setId === 2 || setId === 3)) actions = parseIpfixTemplateSet(msg, body, end, setId);
      else if (version === 9 && setId === 0) actions = parseV9TemplateFlowSet(msg, body, end);
      else if (version === 9 && setId === 1) actions = parseV9OptionsFlowSet(msg, body, end);
      if (actions === null) {
        staged.notes.push(`${what} id ${setId} is reserved; skipped`);
        continue;
      }
      if (typeof actions === "string") return this.fail(d, out, mark, sequence, uptime, actions);
      for (const action of actions) this.stage(s, d, action, udp, now);
    }

    // The message is sound: apply what it staged.
    const waitingSets = staged.waiting.length;
    const defined = this.commit(d, now);
    const step = d.sequence.observe(sequence, waitingSets > 0 ? -1 : ctx.records, uptime);
    d.lost += step.lost - step.recovered;
    let records = ctx.rows;
    let unusable = ctx.unusable;
    let replayed = 0;
    if (defined && d.waiting.length > 0) {
      const r = this.replay(d, out);
      records += r.rows;
      unusable += r.unusable;
      replayed = r.records;
    }
    d.records += records;
    d.unusable += unusable;
    return { status: "decoded", version, domain: domainId, records, unusable, waiting: waitingSets, replayed, lost: step.lost };
  }

  private fail(d: DomainState, out: RowWriter, mark: number, sequence: number, uptime: number, reason: string): MessageOutcome {
    out.truncate(mark);
    this.staged.reset();
    this.noteMalformed(d, reason);
    // The records of a dropped message are unknown: resynchronise on its number.
    d.sequence.observe(sequence, -1, uptime);
    return { status: "dropped", version: d.version, domain: d.domain, reason };
  }

  /** The template for a Data Set: one staged by this message, else the domain's unless expired or withdrawn. */
  private lookup(s: SessionState, d: DomainState, id: number, now: number): Template | undefined {
    const staged = this.staged;
    if (staged.templates !== null && staged.templates.has(id)) return staged.templates.get(id) ?? undefined;
    const t = d.templates.get(id);
    if (t === undefined) return undefined;
    if (t.options ? staged.withdrewAllOptions : staged.withdrewAllData) return undefined;
    if (this.expired(s.transport, t, now)) {
      d.templates.delete(id); // RFC 7011 §8.4: not refreshed within its lifetime
      return undefined;
    }
    return t;
  }

  private stage(s: SessionState, d: DomainState, action: TemplateAction, udp: boolean, now: number): void {
    const staged = this.staged;
    if (action.kind === "define") {
      staged.templates ??= new Map();
      staged.templates.set(action.template.id, { ...action.template, refreshedAt: now });
      return;
    }
    if (udp) {
      staged.notes.push("a template withdrawal over UDP was ignored (RFC 7011 §8.4)");
      return;
    }
    if (action.kind === "withdraw-all") {
      if (action.options) staged.withdrewAllOptions = true;
      else staged.withdrewAllData = true;
      if (staged.templates !== null) {
        for (const [id, t] of staged.templates) if (t !== null && t.options === action.options) staged.templates.delete(id);
      }
      return;
    }
    if (this.lookup(s, d, action.id, now) === undefined) {
      staged.notes.push(`withdrawal of template ${action.id}, which is not defined, was ignored (RFC 7011 §8.1)`);
      return;
    }
    staged.templates ??= new Map();
    staged.templates.set(action.id, null);
  }

  private takeAnnouncements(ctx: RecordContext): void {
    if (!Number.isNaN(ctx.sampledNum)) {
      ctx.scaleNum = ctx.sampledNum;
      ctx.scaleDen = ctx.sampledDen;
    }
    if (!Number.isNaN(ctx.initTimeSeen)) ctx.initTimeMs = ctx.initTimeSeen;
  }

  /** Applies the staged changes; returns whether any template was defined (waiting sets may now decode). */
  private commit(d: DomainState, now: number): boolean {
    const staged = this.staged;
    const ctx = this.ctx;
    let defined = false;
    if (staged.withdrewAllData || staged.withdrewAllOptions) {
      for (const [id, t] of d.templates) {
        if (t.options ? staged.withdrewAllOptions : staged.withdrewAllData) d.templates.delete(id);
      }
    }
    if (staged.templates !== null) {
      for (const [id, t] of staged.templates) {
        if (t === null) {
          d.templates.delete(id);
        } else if (d.templates.has(id) || d.templates.size < MAX_TEMPLATES_PER_DOMAIN) {
          d.templates.set(id, t); // a redefinition replaces (RFC 3954 §7; RFC 7011 §8.1)
          defined = true;
        } else {
          staged.notes.push(`template ${id} was not kept: ${MAX_TEMPLATES_PER_DOMAIN} templates are kept per observation domain`);
        }
      }
    }
    if (ctx.scaleNum !== d.scaleNum || ctx.scaleDen !== d.scaleDen) {
      d.scaleNum = ctx.scaleNum;
      d.scaleDen = ctx.scaleDen;
      d.samplingInterval = ctx.scaleNum / ctx.scaleDen;
    } else if (!Number.isNaN(ctx.sampledNum)) {
      d.samplingInterval = ctx.scaleNum / ctx.scaleDen;
    }
    d.initTimeMs = ctx.initTimeMs;
    for (const w of staged.waiting) this.hold(d, w, now);
    for (const [t, records] of staged.enterpriseCounts) this.countEnterprise(d, t, records);
    if (staged.notes.length > 0) d.lastError = staged.notes[staged.notes.length - 1];
    staged.reset();
    return defined;
  }

  /** Enterprise-specific elements are skipped by length and counted per (PEN, id), one per record. */
  private countEnterprise(d: DomainState, t: Template, records: number): void {
    if (records === 0) return;
    for (const f of t.plan.enterpriseFields) {
      const key = f.enterprise * 65536 + f.id;
      const entry = d.enterprise.get(key);
      if (entry !== undefined) entry.count += records;
      else if (d.enterprise.size < MAX_ENTERPRISE_ELEMENTS) d.enterprise.set(key, { enterprise: f.enterprise, id: f.id, count: records });
    }
  }

  // ---- data sets waiting for their template -------------------------------------------------

  /** Holds a copy of a waiting set; beyond the bounds the oldest are dropped and counted. */
  private hold(d: DomainState, w: Waiting, now: number): void {
    const body = w.body.slice(); // the caller may reuse the datagram's buffer
    if (body.byteLength > this.maxWaitingBytes || this.maxWaitingSets === 0) {
      d.droppedWaiting++;
      d.lastError = `a data set for template ${w.templateId} could not wait: it exceeds the waiting bounds`;
      return;
    }
    d.waiting.push({ ...w, body, receivedAt: now });
    d.waitingBytes += body.byteLength;
    while (d.waiting.length > this.maxWaitingSets || d.waitingBytes > this.maxWaitingBytes) {
      const dropped = d.waiting.shift()!;
      d.waitingBytes -= dropped.body.byteLength;
      d.droppedWaiting++;
      d.lastError = `a data set waiting for template ${dropped.templateId} was dropped: the waiting buffer is full`;
    }
  }

  private expireWaiting(d: DomainState, now: number): void {
    while (d.waiting.length > 0 && now - d.waiting[0].receivedAt > this.waitingLifetimeMs) {
      const dropped = d.waiting.shift()!;
      d.waitingBytes -= dropped.body.byteLength;
      d.droppedWaiting++;
      d.lastError = `a data set waited ${this.waitingLifetimeMs} ms for template ${dropped.templateId}, which never came, and was dropped`;
    }
  }

  /** Decodes the waiting sets whose template is now known, in arrival order. */
  private replay(d: DomainState, out: RowWriter): { rows: number; unusable: number; records: number } {
    const ctx = this.ctx;
    let rows = 0, unusable = 0, records = 0;
    const still: Waiting[] = [];
    for (const w of d.waiting) {
      const t = d.templates.get(w.templateId);
      if (t === undefined) {
        still.push(w);
        continue;
      }
      d.waitingBytes -= w.body.byteLength;
      ctx.reset();
      ctx.exportSeconds = w.exportSeconds;
      ctx.v9 = w.v9;
      ctx.sysUptime = w.sysUptime;
      ctx.initTimeMs = d.initTimeMs;
      ctx.scaleNum = d.scaleNum;
      ctx.scaleDen = d.scaleDen;
      const mark = out.count;
      const ok = t.options ? decodeOptionsRecords(t.plan, w.body, 0, w.body.byteLength, ctx) : decodeFlowRecords(t.plan, w.body, 0, w.body.byteLength, ctx, out);
      if (!ok) {
        out.truncate(mark);
        d.droppedWaiting++;
        d.lastError = `a data set that waited for template ${w.templateId} did not fit it: ${ctx.error}`;
        continue;
      }
      if (t.options) {
        this.takeAnnouncements(ctx);
        d.scaleNum = ctx.scaleNum;
        d.scaleDen = ctx.scaleDen;
        if (!Number.isNaN(ctx.sampledNum)) d.samplingInterval = ctx.scaleNum / ctx.scaleDen;
        d.initTimeMs = ctx.initTimeMs;
      }
      this.countEnterprise(d, t, ctx.records);
      rows += ctx.rows;
      unusable += ctx.unusable;
      records += ctx.records;
    }
    d.waiting = still;
    return { rows, unusable, records };
  }
}
