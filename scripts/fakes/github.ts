// A local stand-in for GitHub's OAuth web flow and user API, for development, the demo
// and tests — never started in production. It speaks just enough of GitHub's documented
// OAuth app flow (authorize → code → access_token) and REST endpoints (GET /user,
// GET /user/emails) for remix-auth-github and Weir's sign-in to run unchanged.
// The accounts are invented; their e-mail domains are reserved for examples (RFC 2606).
import { randomBytes } from "node:crypto";
import { createServer, type IncomingMessage, type ServerResponse } from "node:http";
import type { AddressInfo } from "node:net";

export interface FakeGitHubAccount {
  id: number;
  login: string;
  name: string;
  email: string;
}

export const FAKE_GITHUB_ACCOUNTS: readonly FakeGitHubAccount[] = [
  { id: 1001, login: "ada-admin", name: "Ada Admin", email: "ada@example.com" },
  { id: 1002, login: "eli-engineer", name: "Eli Engineer", email: "eli@example.com" },
  { id: 1003, login: "vera-viewer", name: "Vera Viewer", email: "vera@example.com" },
  { id: 1004, login: "oskar-outsider", name: "Oskar Outsider", email: "oskar@example.org" },
  { id: 1005, login: "nina-newcomer", name: "Nina Newcomer", email: "nina@example.net" },
];

export interface FakeGitHub {
  url: string;
  close(): Promise<void>;
}

const escape = (s: string) => s.replace(/[&<>"']/g, (c) => `&#${c.charCodeAt(0)};`);

export async function startFakeGitHub(options: { host?: string; port?: number; accounts?: readonly FakeGitHubAccount[] } = {}): Promise<FakeGitHub> {
  const accounts = options.accounts ?? FAKE_GITHUB_ACCOUNTS;
  const codes = new Map<string, FakeGitHubAccount>();
  const tokens = new Map<string, FakeGitHubAccount>();

  const server = createServer(async (req, res) => {
    try {
      await handle(req, res);
    } catch (error) {
      send(res, 500, { message: String(error) });
    }
  });

  async function handle(req: IncomingMessage, res: ServerResponse) {
    const url = new URL(req.url ?? "/", "http://fake.invalid");
    // Browsers ask every host for an icon; an empty answer keeps their consoles clean.
    if (url.pathname === "/favicon.ico") {
      res.writeHead(204);
      res.end();
      return;
    }
    if (req.method === "GET" && url.pathname === "/login/oauth/authorize") {
      const redirect = url.searchParams.get("redirect_uri");
      const state = url.searchParams.get("state");
      if (!redirect || !state || !url.searchParams.get("client_id")) return send(res, 400, { message: "client_id, redirect_uri and state are required" });
      const links = accounts
        .map((a) => {
          const approve = `/login/oauth/approve?${new URLSearchParams({ login: a.login, redirect_uri: redirect, state })}`;
          return `<li><a href="${escape(approve)}" data-login="${escape(a.login)}">Sign in as <strong>${escape(a.login)}</strong> — ${escape(a.name)} &lt;${escape(a.email)}&gt;</a></li>`;
        })
        .join("\n");
      res.writeHead(200, { "content-type": "text/html; charset=utf-8" });
      res.end(`<!doctype html><html lang="en"><head><meta charset="utf-8"><title>Fake GitHub — development sign-in</title>
<style>body{font:16px system-ui,sans-serif;max-width:40rem;margin:3rem auto;padding:0 1rem;color:#1b2a30}li{margin:.6rem 0}a{color:#0d5c63}</style></head>
<body><h1>Fake GitHub</h1><p>A local stand-in for GitHub sign-in, started by Weir outside production. Choose an invented account:</p>
<ul>${links}</ul></body></html>`);
      return;
    }
    if (req.method === "GET" && url.pathname === "/login/oauth/approve") {
      const account = accounts.find((a) => a.login === url.searchParams.get("login"));
      const redirect = url.searchParams.get("redirect_uri");
      if (!account || !redirect) return send(res, 400, { message: "unknown account" });
      const code = randomBytes(12).toString("hex");
      codes.set(code, account);
      const target = new URL(redirect);
      target.searchParams.set("code", code);
      target.searchParams.set("state", url.searchParams.get("state") ?? "");
      res.writeHead(302, { location: target.toString() });
      res.end();
      return;
    }
    if (req.method === "POST" && url.pathname === "/login/oauth/access_token") {
      const body = new URLSearchParams(await readBody(req));
      const account = codes.get(body.get("code") ?? "");
      if (!account) return send(res, 200, { error: "bad_verification_code", error_description: "The code passed is incorrect or expired." });
      codes.delete(body.get("code")!);
      const token = `fake_${randomBytes(16).toString("hex")}`;
      tokens.set(token, account);
      return send(res, 200, { access_token: token, token_type: "bearer", scope: "read:user,user:email" });
    }
    const account = tokens.get((req.headers.authorization ?? "").replace(/^(Bearer|token)\s+/i, ""));
    if (req.method === "GET" && (url.pathname === "/user" || url.pathname === "/user/emails")) {
      if (!account) return send(res, 401, { message: "Bad credentials" });
      if (url.pathname === "/user") {
        return send(res, 200, { id: account.id, login: account.login, name: account.name, email: account.email, avatar_url: null });
      }
      return send(res, 200, [{ email: account.email, primary: true, verified: true, visibility: "private" }]);
    }
    send(res, 404, { message: "Not Found" });
  }

  await new Promise<void>((resolve) => server.listen(options.port ?? 0, options.host ?? "127.0.0.1", resolve));
  const { port } = server.address() as AddressInfo;
  return {
    url: `http://${options.host ?? "127.0.0.1"}:${port}`,
    close: () => new Promise<void>((resolve) => server.close(() => resolve())),
  };
}

function send(res: ServerResponse, status: number, body: unknown) {
  res.writeHead(status, { "content-type": "application/json" });
  res.end(JSON.stringify(body));
}

function readBody(req: IncomingMessage): Promise<string> {
  return new Promise((resolve, reject) => {
    let text = "";
    req.setEncoding("utf8");
    req.on("data", (chunk: string) => {
      text += chunk;
      if (text.length > 65536) req.destroy(new Error("body too large"));
    });
    req.on("end", () => resolve(text));
    req.on("error", reject);
  });
}
