/**
 * The console's fetcher for SWR: JSON from Weir's own routes, or an error that carries what
 * a person should read. Weir's API answers errors as `{ error: { code, message, details } }`;
 * console guards answer `{ message }`; a session that ended shows up as a redirect to sign-in.
 *
 * Browser-side helper with no server dependencies.
 */

export interface FetchIssue {
  path: string;
  message: string;
}

export class FetchError extends Error {
  override name = "FetchError";
  constructor(
    message: string,
    readonly status: number,
    readonly details: FetchIssue[] = [],
  ) {
    super(message);
  }
}

function issuesOf(value: unknown): FetchIssue[] {
  if (!Array.isArray(value)) return [];
  return value
    .filter((d): d is { path?: unknown; message: string } => typeof d === "object" && d !== null && typeof (d as { message?: unknown }).message === "string")
    .map((d) => ({ path: typeof d.path === "string" ? d.path : "", message: d.message }));
}

export async function fetchJson<T>(url: string): Promise<T> {
  let res: Response;
  try {
    res = await fetch(url, { headers: { accept: "application/json" }, credentials: "same-origin" });
  } catch (error) {
    throw new FetchError(`Could not reach Weir (${(error as Error).message}). Check the connection; it retries on its own.`, 0);
  }
  if (res.redirected && new URL(res.url).pathname === "/signin") {
    throw new FetchError("Your session has ended. Sign in again to see the numbers.", 401);
  }
  const type = res.headers.get("content-type") ?? "";
  const body: unknown = type.includes("json") ? await res.json().catch(() => undefined) : undefined;
  if (res.ok && body !== undefined) return body as T;
  if (res.ok) throw new FetchError(`Weir answered with ${type || "no content type"} instead of JSON.`, res.status);

  const payload = (body ?? {}) as { error?: { message?: unknown; details?: unknown }; message?: unknown };
  const message =
    typeof payload.error?.message === "string"
      ? payload.error.message
      : typeof payload.message === "string"
        ? payload.message
        : `Weir answered HTTP ${res.status}${res.statusText ? ` ${res.statusText}` : ""}.`;
  throw new FetchError(message, res.status, issuesOf(payload.error?.details));
}
