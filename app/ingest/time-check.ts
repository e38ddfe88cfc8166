/**
 * Time sanity of a batch of packed rows (kept-codec.ts layout), before any reservoir sees it:
 * a start or end more than the tolerance ahead of the server clock, or before the floor, or a
 * start older than what the tenant's retention keeps, refuses the record; accepted records
 * are counted as late (start before the open window) and clock-skewed (a time ahead of the
 * server clock, within the tolerance).
 *
 * The pass is a handful of number comparisons per row (ingest is benchmarked); messages are
 * built only for the first `maxDetails` refusals.
 *
 * Pure module: no I/O.
 */
import { showTime, unitHint } from "../time/flow-time.ts";
import { KEPT_ROW_BYTES, ROW_START_AT } from "./kept-codec.ts";

const ROW_END_AT = ROW_START_AT + 8;

export interface TimeLimits {
  /** The server clock, epoch ms. */
  now: number;
  /** Times before this are refused (INGEST_TIME_FLOOR). */
  floorMs: number;
  /** Times after now + this are refused (INGEST_FUTURE_TOLERANCE_SECONDS × 1000). */
  futureToleranceMs: number;
  /** Starts before this are refused: retention would delete their windows. -Infinity for no bound. */
  oldestStartMs: number;
  /** Why `oldestStartMs` is where it is, for the message. */
  retentionReason: string;
  /** Start of the window that holds `now`: records that start before it are late. */
  openWindowStart: number;
}

export interface TimeCheck {
  late: number;
  clockSkewed: number;
  refused: number;
  /** The first refusals: row index, "start" or "end", and why. */
  details: { index: number; path: string; message: string }[];
  /** 1 for each refused row when any was refused, else null. */
  refusedRows: Uint8Array | null;
}

function reason(name: "start" | "end", ms: number, limits: TimeLimits): string {
  const latest = limits.now + limits.futureToleranceMs;
  const hint = unitHint(ms, limits.floorMs, latest);
  const more = hint ? `; ${hint}` : "";
  if (ms > latest) {
    return `${name} ${showTime(ms)} is more than ${limits.futureToleranceMs / 1000} s ahead of the server clock (${showTime(limits.now)}; INGEST_FUTURE_TOLERANCE_SECONDS)${more}`;
  }
  if (ms < limits.floorMs) return `${name} ${showTime(ms)} is before ${showTime(limits.floorMs)}, the earliest time Weir accepts (INGEST_TIME_FLOOR)${more}`;
  return `${name} ${showTime(ms)} is older than the tenant's retention keeps: ${limits.retentionReason}`;
}

/**
 * Checks the start and end (NaN = absent) of `count` rows.
 *
 * @example checkRowTimes(view, 1, { now, floorMs, futureToleranceMs: 300_000, oldestStartMs: -Infinity, retentionReason: "", openWindowStart })
 *   // { late: 0, clockSkewed: 0, refused: 0, details: [], refusedRows: null } for a row that starts in the open window
 */
export function checkRowTimes(view: DataView, count: number, limits: TimeLimits, maxDetails = 100): TimeCheck {
  const { now, floorMs, openWindowStart } = limits;
  const latest = now + limits.futureToleranceMs;
  // The floor and the retention bound together: a start below either is refused.
  const earliestStart = Math.max(floorMs, limits.oldestStartMs);
  let late = 0, clockSkewed = 0, refused = 0;
  let refusedRows: Uint8Array | null = null;
  const details: TimeCheck["details"] = [];
  for (let i = 0; i < count; i++) {
    const at = i * KEPT_ROW_BYTES;
    const start = view.getFloat64(at + ROW_START_AT, true);
    const end = view.getFloat64(at + ROW_END_AT, true);
    // NaN (absent) fails every comparison, so an absent time is never refused.
    if (start < earliestStart || start > latest || end < floorMs || end > latest) {
      refused++;
      (refusedRows ??= new Uint8Array(count))[i] = 1;
      if (details.length < maxDetails) {
        const startBad = start < earliestStart || start > latest;
        details.push({ index: i, path: startBad ? "start" : "end", message: reason(startBad ? "start" : "end", startBad ? start : end, limits) });
      }
      continue;
    }
    if (start < openWindowStart) late++;
    if (start > now || end > now) clockSkewed++;
  }
  return { late, clockSkewed, refused, details, refusedRows };
}

/** The rows not marked in `refusedRows`, as a new buffer. */
export function withoutRows(rows: Uint8Array, count: number, refusedRows: Uint8Array): { rows: Uint8Array<ArrayBuffer>; count: number } {
  let kept = 0;
  for (let i = 0; i < count; i++) if (refusedRows[i] === 0) kept++;
  const out = new Uint8Array(kept * KEPT_ROW_BYTES);
  let to = 0;
  for (let i = 0; i < count; i++) {
    if (refusedRows[i] === 1) continue;
    out.set(rows.subarray(i * KEPT_ROW_BYTES, (i + 1) * KEPT_ROW_BYTES), to);
    to += KEPT_ROW_BYTES;
  }
  return { rows: out, count: kept };
}
