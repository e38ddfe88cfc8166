/**
 * How the Merge page writes times and numbers: UTC and the fixed locale en-US, so the
 * server and the browser render the same text.
 */

/** Epoch ms or ISO 8601 as `YYYY-MM-DD HH:MM` (UTC). */
export function utcMinute(at: number | string): string {
  return new Date(at).toISOString().slice(0, 16).replace("T", " ");
}

/** @example count(12345) // "12,345" */
export function count(n: number): string {
  return n.toLocaleString("en-US");
}

/** @example windowLength(300) // "5 min"; windowLength(3600) // "1 h" */
export function windowLength(seconds: number): string {
  return seconds % 3600 === 0 ? `${seconds / 3600} h` : seconds % 60 === 0 ? `${seconds / 60} min` : `${seconds} s`;
}

/**
 * τ as read in a table: 0 means every record of the window was kept (exact); large values
 * whole, small ones to four significant figures.
 *
 * @example tau(0) // "0"; tau(123456.78) // "123,457"; tau(12.3456) // "12.35"
 */
export function tau(value: number): string {
  if (value === 0) return "0";
  if (value >= 1000) return Math.round(value).toLocaleString("en-US");
  return String(Number(value.toPrecision(4)));
}
