import type { KeptColumns } from "./columns.ts";

/**
 * Kept records at about 86 bytes each (addresses, counters, ports, AS numbers and interfaces
 * in columns): 2 million is some 170 MB, a week of 5-minute windows for one collector at k = 1024.
 */
export const SNAPSHOT_CACHE_MAX_RECORDS = 2_000_000;

/**
 * Columns of reservoirs' kept sets as last read from SQLite, least recently used dropped
 * first once they hold more than `maxRecords` kept records in all.
 *
 * An entry stays valid while the reservoir's `next_seq` is unchanged: the kept set changes
 * only when a record enters, and every record that enters takes a new seq. τ is not cached;
 * it is read from the reservoir row on every query.
 *
 * Pure module: no I/O.
 */
export class SnapshotCache {
  private readonly entries = new Map<number, { nextSeq: number; columns: KeptColumns }>();
  private held = 0;

  constructor(readonly maxRecords = SNAPSHOT_CACHE_MAX_RECORDS) {}

  /** The kept columns of a reservoir at `nextSeq`, or undefined (a stale entry is dropped). */
  get(reservoirId: number, nextSeq: number): KeptColumns | undefined {
    const entry = this.entries.get(reservoirId);
    if (entry === undefined) return undefined;
    this.entries.delete(reservoirId);
    if (entry.nextSeq !== nextSeq) {
      this.held -= entry.columns.length;
      return undefined;
    }
    // Re-inserted so that Map order, oldest first, is least recently used first.
    this.entries.set(reservoirId, entry);
    return entry.columns;
  }

  set(reservoirId: number, nextSeq: number, columns: KeptColumns): void {
    const old = this.entries.get(reservoirId);
    if (old !== undefined) {
      this.entries.delete(reservoirId);
      this.held -= old.columns.length;
    }
    if (columns.length > this.maxRecords) return;
    this.entries.set(reservoirId, { nextSeq, columns });
    this.held += columns.length;
    for (const [id, entry] of this.entries) {
      if (this.held <= this.maxRecords) break;
      this.entries.delete(id);
      this.held -= entry.columns.length;
    }
  }

  /** Kept records held in all. */
  get records(): number {
    return this.held;
  }

  /** Reservoirs held. */
  get size(): number {
    return this.entries.size;
  }
}
