// Runs the admin CLI as a user does: a child process against a given database.
import { execFile } from "node:child_process";
import { fileURLToPath } from "node:url";

const ROOT = fileURLToPath(new URL("../..", import.meta.url));

export interface Run {
  code: number;
  stdout: string;
  stderr: string;
}

/** `npm run admin -- <args>` against `databaseUrl`, with any further environment given. */
export function admin(databaseUrl: string, args: string[], env: Record<string, string> = {}): Promise<Run> {
  return new Promise((resolve) => {
    execFile(
      process.execPath,
      ["--import", "tsx", "scripts/admin.ts", ...args],
      { cwd: ROOT, env: { ...process.env, DATABASE_URL: databaseUrl, DATABASE_AUTH_TOKEN: "", ...env } },
      (error, stdout, stderr) => resolve({ code: error ? Number(error.code) : 0, stdout, stderr }),
    );
  });
}
