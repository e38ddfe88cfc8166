/**
 * Loss from sequence numbers, per (transport session, observation domain).
 *
 * The standards: an IPFIX Sequence Number counts the Data Records sent before this message
 * (RFC 7011 §3.1, options Data Records included); a NetFlow v9 one counts export packets
 * (RFC 3954 §5.1). Real exporters deviate — some count the current message's records too,
 * some count messages — so each exporter's convention is learnt from consecutive messages:
 * a message whose number the convention it has kept to explains is never loss, and loss is
 * counted under that convention. A number that goes backwards
 * (an exporter restart: back near zero, or NetFlow v9 sysUpTime lower than before) starts
 * over without counting loss, unless it fills a gap reported earlier (a late, reordered UDP
 * datagram), which is then no longer counted as lost. A message whose record count is not
 * known (sets waiting for a template, or dropped as malformed) starts over too.
 *
 * Pure module: no I/O.
 */

/** RFC 7011 §3.1: the number counts records sent before this message. */
export const PREVIOUS_RECORDS = 0;
/** Seen in practice: the number counts this message's records too. */
export const CURRENT_RECORDS = 1;
/** RFC 3954 §5.1: the number counts messages (export packets). */
export const PACKETS = 2;

/**
 * A forward jump larger than this is taken as a restart, not loss: a 2^32 counter that wrapped
 * or an exporter that restarted from an arbitrary number cannot be told from a gap of billions.
 * 2^24 records is well beyond what a burst of datagram loss between two messages drops.
 */
export const MAX_GAP = 16_777_216;
/** Gaps remembered for late datagrams. */
const MAX_GAPS = 16;

const MOD = 4294967296;

function mod32(x: number): number {
  return ((x % MOD) + MOD) % MOD;
}

/** Signed distance a → b on the 2^32 circle, in [−2^31, 2^31). */
function distance(a: number, b: number): number {
  const d = mod32(b - a);
  return d >= MOD / 2 ? d - MOD : d;
}

/** What one message does to the loss count. */
export interface SequenceStep {
  /** Newly found lost (≥ 0), in the unit of the convention in use. */
  readonly lost: number;
  /** Earlier loss taken back because the missing message arrived late. */
  readonly recovered: number;
}

const NOTHING: SequenceStep = Object.freeze({ lost: 0, recovered: 0 });

export class SequenceTracker {
  /** The convention in use, or null before the first message explained by one. */
  convention: number | null = null;
  private readonly streak = [0, 0, 0];
  private lastSeq = -1;
  private lastCount = -1; // -1: unknown
  private lastUptime = -1;
  private gaps: [start: number, length: number][] = [];

  constructor(private readonly fallback: number) {}

  /** Sequence units of loss: records, or packets for a packet-counting exporter. */
  get unit(): "records" | "packets" {
    return (this.convention ?? this.fallback) === PACKETS ? "packets" : "records";
  }

  /** Forgets the history (the session ended); the learnt convention stays. */
  reset(): void {
    this.lastSeq = -1;
    this.lastCount = -1;
    this.lastUptime = -1;
    this.gaps = [];
  }

  /**
   * Takes the next message: its sequence number, its data-record count (-1 when not known)
   * and, for NetFlow v9, the header's sysUpTime (-1 otherwise).
   * @example t.observe(0, 30, -1); t.observe(30, 30, -1) // { lost: 0, recovered: 0 } (RFC 7011 §3.1)
   */
  observe(seq: number, count: number, uptime: number): SequenceStep {
    const prevSeq = this.lastSeq;
    const prevCount = this.lastCount;
    const restarted = uptime >= 0 && this.lastUptime >= 0 && uptime < this.lastUptime;
    if (prevSeq < 0 || restarted) {
      this.take(seq, count, uptime, restarted);
      return NOTHING;
    }
    // Where each convention expects this message, as the start of the span it covers. A
    // convention excuses a message only while it is credible — it explained the previous message
    // too — so that a real gap is not excused by another convention matching by coincidence.
    // With no credible convention (the start, or just after a gap) any match excuses.
    // (Once per message: bit sets rather than arrays.)
    const streak = this.streak;
    const anyCredible = streak[0] > 0 || streak[1] > 0 || streak[2] > 0;
    let excusing = 0;
    for (let c = 0; c < 3; c++) {
      if (!this.known(c, prevCount, count)) continue;
      const match = this.spanStart(c, seq, count) === this.spanEnd(c, prevSeq, prevCount);
      if (match && (!anyCredible || streak[c] > 0)) excusing |= 1 << c;
      streak[c] = match ? streak[c] + 1 : 0;
    }
    if (excusing !== 0) {
      const current = this.convention;
      if (current === null || (excusing & (1 << current)) === 0) {
        this.convention = excusing & (1 << this.fallback) ? this.fallback : excusing & 1 ? 0 : excusing & 2 ? 1 : 2;
      }
      this.take(seq, count, uptime, false);
      return NOTHING;
    }
    const c = this.convention ?? this.fallback;
    if (!this.known(c, prevCount, count)) {
      this.take(seq, count, uptime, true); // resynchronise rather than guess
      return NOTHING;
    }
    const expected = this.spanEnd(c, prevSeq, prevCount);
    const start = this.spanStart(c, seq, count);
    const gap = distance(expected, start);
    if (gap > 0 && gap <= MAX_GAP) {
      this.gaps.push([expected, gap]);
      if (this.gaps.length > MAX_GAPS) this.gaps.shift();
      this.take(seq, count, uptime, false);
      return { lost: gap, recovered: 0 };
    }
    if (gap < 0) {
      const recovered = this.fill(start, this.spanLength(c, count));
      if (recovered > 0) return { lost: 0, recovered }; // a late datagram: the newest message stays the reference
    }
    this.take(seq, count, uptime, true); // backwards (restart) or too far ahead: start over
    return NOTHING;
  }

  /** Whether convention c can be checked: the record counts it needs are known. */
  private known(c: number, prevCount: number, count: number): boolean {
    return c === PREVIOUS_RECORDS ? prevCount >= 0 : c === CURRENT_RECORDS ? count >= 0 : true;
  }

  private take(seq: number, count: number, uptime: number, clearGaps: boolean): void {
    this.lastSeq = seq;
    this.lastCount = count;
    if (uptime >= 0) this.lastUptime = uptime;
    if (clearGaps) this.gaps = [];
  }

  private spanLength(c: number, count: number): number {
    return c === PACKETS ? 1 : count;
  }

  private spanStart(c: number, seq: number, count: number): number {
    return c === CURRENT_RECORDS ? mod32(seq - count) : seq;
  }

  private spanEnd(c: number, seq: number, count: number): number {
    if (c === PACKETS) return mod32(seq + 1);
    return c === CURRENT_RECORDS ? seq : mod32(seq + count);
  }

  /** Removes [start, start+length) from the remembered gaps; returns how much it removed. */
  private fill(start: number, length: number): number {
    if (length <= 0) return 0;
    for (let i = 0; i < this.gaps.length; i++) {
      const [gapStart, gapLength] = this.gaps[i];
      const offset = distance(gapStart, start);
      if (offset < 0 || offset + length > gapLength) continue;
      const replaced: [number, number][] = [];
      if (offset > 0) replaced.push([gapStart, offset]);
      if (offset + length < gapLength) replaced.push([mod32(start + length), gapLength - offset - length]);
      this.gaps.splice(i, 1, ...replaced);
      return length;
    }
    return 0;
  }
}
