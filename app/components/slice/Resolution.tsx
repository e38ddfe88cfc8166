import type { ResolutionJson } from "~/query/answer";

const HOUR_SECONDS = 3600;
const MONTHS = ["Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec"];

/** 300 → "5-minute windows"; 3600 → "hourly roll-ups" for a tenant with shorter windows, else "hourly windows". */
function lengthLabel(windowSeconds: number, tenantWindowSeconds: number): string {
  if (windowSeconds === HOUR_SECONDS) return tenantWindowSeconds < HOUR_SECONDS ? "hourly roll-ups" : "hourly windows";
  if (windowSeconds % HOUR_SECONDS === 0) return `${windowSeconds / HOUR_SECONDS}-hour windows`;
  if (windowSeconds % 60 === 0) return `${windowSeconds / 60}-minute windows`;
  return `${windowSeconds}-second windows`;
}

/** UTC, fixed English month names, so the server and the browser write the same text. */
function shortUtc(ms: number, withYear: boolean): string {
  const d = new Date(ms);
  const time = d.toISOString().slice(11, 16);
  return `${MONTHS[d.getUTCMonth()]} ${d.getUTCDate()}${withYear ? ` ${d.getUTCFullYear()}` : ""} ${time}`;
}

/**
 * The sentence saying which window lengths answered, or null when one length of the
 * tenant's own kind did (nothing worth a line).
 *
 * @example resolutionText([{ windowSeconds: 3600, windows: 24, from: "2026-04-30T10:00:00.000Z", to: "2026-05-01T10:00:00.000Z" },
 *   { windowSeconds: 300, windows: 288, from: "2026-05-01T10:00:00.000Z", to: "2026-05-02T10:00:00.000Z" }], 300)
 *   // "Answered from hourly roll-ups (Apr 30 10:00 – May 1 10:00 UTC) and 5-minute windows (May 1 10:00 – May 2 10:00 UTC)."
 */
export function resolutionText(resolution: readonly ResolutionJson[] | undefined, tenantWindowSeconds: number): string | null {
  if (!resolution || resolution.length === 0) return null;
  const rolledUp = resolution.some((r) => r.windowSeconds === HOUR_SECONDS && tenantWindowSeconds < HOUR_SECONDS);
  if (resolution.length === 1 && !rolledUp) return null;
  const years = new Set(resolution.flatMap((r) => [new Date(r.from).getUTCFullYear(), new Date(r.to).getUTCFullYear()]));
  const withYear = years.size > 1;
  const parts = resolution.map(
    (r) => `${lengthLabel(r.windowSeconds, tenantWindowSeconds)} (${shortUtc(Date.parse(r.from), withYear)} – ${shortUtc(Date.parse(r.to), withYear)} UTC)`,
  );
  const listed = parts.length === 1 ? parts[0] : `${parts.slice(0, -1).join(", ")} and ${parts.at(-1)}`;
  return `Answered from ${listed}.`;
}

/** One line under the headline when older parts of the range came from hourly roll-ups or several window lengths. */
export function ResolutionNote({ resolution, windowSeconds }: { resolution: readonly ResolutionJson[] | undefined; windowSeconds: number }) {
  const text = resolutionText(resolution, windowSeconds);
  if (text === null) return null;
  const rolledUp = resolution!.some((r) => r.windowSeconds === HOUR_SECONDS) && windowSeconds < HOUR_SECONDS;
  return (
    <p className="mt-2 text-sm text-river-300">
      {text}
      {rolledUp
        ? ` Roll-ups give the same unbiased estimates at a coarser time resolution. ${
            resolution!.find((r) => r.rollUp)?.rollUp?.note ?? "Every interval over hourly roll-ups is wider, not only small subsets'."
          }`
        : null}
    </p>
  );
}
