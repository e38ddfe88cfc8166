// Signs a test client in through the local fake GitHub, as a browser would: POST
// /auth/github, follow the redirect to the fake's authorize page, pick an account,
// come back to the callback, keep the session cookie.

/** A minimal cookie jar for fetch (name → value; enough for Weir's own cookies). */
export class CookieJar {
  private readonly cookies = new Map<string, string>();

  store(response: Response): void {
    for (const header of response.headers.getSetCookie()) {
      const [pair] = header.split(";");
      const eq = pair.indexOf("=");
      const name = pair.slice(0, eq).trim();
      const value = pair.slice(eq + 1).trim();
      if (/max-age=0|expires=thu, 01 jan 1970/i.test(header) || value === "") this.cookies.delete(name);
      else this.cookies.set(name, value);
    }
  }

  header(): string {
    return [...this.cookies].map(([n, v]) => `${n}=${v}`).join("; ");
  }
}

export interface SignedIn {
  jar: CookieJar;
  /** fetch with the session cookie, not following redirects. */
  fetch(path: string, init?: RequestInit): Promise<Response>;
  /** POST a form (URL-encoded) with the session cookie. */
  post(path: string, fields: Record<string, string>): Promise<Response>;
}

/** Signs in as one of the fake GitHub's accounts (by login) and returns a client with the session. */
export async function signIn(baseUrl: string, login: string, returnTo = "/console"): Promise<SignedIn> {
  const jar = new CookieJar();
  const start = await fetch(`${baseUrl}/auth/github`, {
    method: "POST",
    redirect: "manual",
    headers: { "content-type": "application/x-www-form-urlencoded" },
    body: new URLSearchParams({ returnTo }),
  });
  jar.store(start);
  const authorize = start.headers.get("location");
  if (start.status !== 302 || !authorize) throw new Error(`sign-in did not redirect to GitHub (${start.status})`);
  const page = await (await fetch(authorize)).text();
  const approve = new RegExp(`href="([^"]+)" data-login="${login}"`)
    .exec(page)?.[1]
    ?.replace(/&#(\d+);/g, (_, code: string) => String.fromCharCode(Number(code)))
    .replaceAll("&amp;", "&");
  if (!approve) throw new Error(`the fake GitHub has no account ${login}`);
  const approved = await fetch(new URL(approve, authorize), { redirect: "manual" });
  const callback = approved.headers.get("location");
  if (!callback) throw new Error("the fake GitHub did not redirect back");
  const done = await fetch(callback, { redirect: "manual", headers: { cookie: jar.header() } });
  jar.store(done);
  if (done.status !== 302) throw new Error(`the callback answered ${done.status}: ${await done.text()}`);
  const client: SignedIn = {
    jar,
    fetch: (path, init = {}) => fetch(`${baseUrl}${path}`, { redirect: "manual", ...init, headers: { ...(init.headers as Record<string, string>), cookie: jar.header() } }),
    post: (path, fields) =>
      client.fetch(path, { method: "POST", headers: { "content-type": "application/x-www-form-urlencoded" }, body: new URLSearchParams(fields) }),
  };
  return client;
}
