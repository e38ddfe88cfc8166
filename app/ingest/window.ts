/**
 * The start (epoch ms, UTC) of the fixed window of `windowSeconds` that holds `timeMs`.
 * Windows are aligned to the Unix epoch, so every node and collector agrees on them.
 *
 * @example windowStartOf(Date.UTC(2026, 0, 1, 2, 7, 30), 300) // Date.UTC(2026, 0, 1, 2, 5)
 */
export function windowStartOf(timeMs: number, windowSeconds: number): number {
  const length = windowSeconds * 1000;
  return Math.floor(timeMs / length) * length;
}

/** Window lengths a tenant may choose, in seconds (1, 5, 15 or 60 minutes). */
export const WINDOW_SECONDS_CHOICES = [60, 300, 900, 3600] as const;
