/**
 * Sanity of flow times: the bounds every stored start and end must lie within, and a hint
 * when a time out of bounds looks like the right time in the wrong unit (epoch seconds sent
 * as milliseconds is a common exporter mistake; microseconds or nanoseconds the other way).
 *
 * Pure module: no I/O.
 */

/**
 * The first instant RFC 3339 cannot write (its years have four digits, §5.6 date-fullyear).
 * Flow times must lie before it; ECMAScript dates end later (8.64e15 ms, ECMA-262 TimeClip),
 * so every accepted time can also be formatted.
 */
export const END_OF_TIME_MS = 253_402_300_800_000; // 10000-01-01T00:00:00Z

/** 2000-01-01T00:00:00Z: the default INGEST_TIME_FLOOR. */
export const DEFAULT_TIME_FLOOR_MS = 946_684_800_000;

/** RFC 3339 text of a time when it has one, else the number. */
export function showTime(ms: number): string {
  return Number.isFinite(ms) && ms >= 0 && ms < END_OF_TIME_MS ? new Date(ms).toISOString() : String(ms);
}

const UNITS: readonly [factor: number, hint: string][] = [
  [1000, "the value looks like epoch seconds; send milliseconds (×1000) or name it flowStartSeconds / flowEndSeconds"],
  [1 / 1000, "the value looks like epoch microseconds; send milliseconds (÷1000) or name it flowStartMicroseconds / flowEndMicroseconds"],
  [1 / 1_000_000, "the value looks like epoch nanoseconds; send milliseconds (÷1 000 000) or name it flowStartNanoseconds / flowEndNanoseconds"],
];

/**
 * When `ms` lies outside [low, high] but `ms` × 1000, ÷ 1000 or ÷ 10^6 lies inside, the
 * sentence that says so (with the time it would then be); otherwise "".
 *
 * @example unitHint(1714528800, DEFAULT_TIME_FLOOR_MS, Date.UTC(2030, 0, 1))
 *   // "as seconds it would be 2024-05-01T02:00:00.000Z: the value looks like epoch seconds; …"
 */
export function unitHint(ms: number, low: number, high: number): string {
  for (const [factor, hint] of UNITS) {
    const scaled = Math.floor(ms * factor);
    if (scaled >= low && scaled <= high) {
      const unit = factor === 1000 ? "seconds" : factor === 1 / 1000 ? "microseconds" : "nanoseconds";
      return `as ${unit} it would be ${showTime(scaled)}: ${hint}`;
    }
  }
  return "";
}
