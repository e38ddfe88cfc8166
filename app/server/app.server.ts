import { existsSync } from "node:fs";
import { createServer, type Server } from "node:http";
import type { AddressInfo } from "node:net";
import { join } from "node:path";
import { fileURLToPath, pathToFileURL } from "node:url";
import { createRequestHandler } from "@react-router/express";
import express, { type ErrorRequestHandler, type RequestHandler } from "express";
import type { ServerBuild } from "react-router";
import type { ViteDevServer } from "vite";
import { closeDb, createDb, type Db } from "../db/client.server";
import { runMigrations } from "../db/migrate.server";
import { loadEnv, type Env } from "../env.server";
import { createLogger, type Logger } from "../logger.server";
import { ReservoirManager } from "../ingest/manager.server";
import { ParsePool } from "../ingest/parse-pool.server";
import type { GitHubConfig } from "../auth/github.server";
import { createMail, type Mail } from "../mail.server";
import type { UniformSource } from "../sampling/uniform";
import { startRetentionTimer, type RetentionTimerOptions } from "../retention/timer.server";
import { startCalibrationTimer, type CalibrationTimerOptions } from "../calibration/timer.server";
import { Collection } from "../collect/collection.server";
import { SnapshotCache } from "../query/snapshot-cache";
import { warmRecentWindows, type WarmReport } from "../query/warm.server";
import { startPackTimer } from "../query/pack.server";

// Long enough after a start for the warm-up of recent windows to have read them first.
const PACK_FIRST_RUN_DELAY_MS = 30_000;

declare module "react-router" {
  // What every loader and action receives as `context`. Server-wide resources travel this
  // way because route modules live in another module graph (Vite's in development, the
  // server bundle in production) and would otherwise open their own copies.
  interface AppLoadContext {
    db: Db;
    env: Env;
    logger: Logger;
    manager: ReservoirManager;
    parsePool: ParsePool;
    github: GitHubConfig;
    mail: Mail;
    collection: Collection;
    /** Kept records read from SQLite, by reservoir; warmed with the recent windows after start. */
    snapshots: SnapshotCache;
  }
}

const PROJECT_ROOT = fileURLToPath(new URL("../..", import.meta.url));
const SHUTDOWN_GRACE_MS = 10_000;
/** Printed (and logged) whenever demo mode runs, so nobody mistakes it for a deployment. */
export const DEMO_BANNER = "demo: invented data, fake sign-in (WEIR_DEMO=1: local fake GitHub and fake SMTP, public demo keys; not for real traffic)";

export interface StartServerOptions {
  /** Validated environment; defaults to `loadEnv()` (process env and `.env`). */
  env?: Env;
  /** Overrides `env.PORT`; 0 asks the OS for a free port. */
  port?: number;
  /** Overrides `env.HOST`. */
  host?: string;
  /** Defaults to a pino logger at `env.LOG_LEVEL`. */
  logger?: Logger;
  /** Where priorities draw their uniforms; tests inject a seeded source. */
  uniform?: UniformSource;
  /** The clock ingest checks flow times against (default Date.now); tests inject one. */
  now?: () => number;
  /** Overrides of the roll-up/retention timer (interval from `env.RETENTION_INTERVAL_MINUTES`, first run after a minute); tests shorten them. */
  retention?: Partial<RetentionTimerOptions>;
  /** Overrides of the calibration timer (interval from `env.CALIBRATION_INTERVAL_MINUTES`, first run after a minute). */
  calibration?: Partial<CalibrationTimerOptions>;
  /**
   * Overrides of the native-collection listener ports (env IPFIX_UDP_PORT, NETFLOW_UDP_PORT,
   * IPFIX_TCP_PORT): null turns one off, 0 asks the OS for a free port (tests).
   */
  collect?: { ipfixUdpPort?: number | null; netflowUdpPort?: number | null; ipfixTcpPort?: number | null; flushMs?: number; statsIntervalMs?: number };
  /** Overrides of the packing of closed windows (interval from `env.PACK_INTERVAL_SECONDS`, first run 30 s after start). */
  pack?: { intervalMs?: number; firstRunDelayMs?: number; now?: () => number };
  /** Read the last day's kept records into the snapshot cache after start, in the background (default true). */
  warm?: boolean;
}

export interface WeirServer {
  /** Base URL without a trailing slash, e.g. `http://127.0.0.1:3000`. */
  url: string;
  port: number;
  httpServer: Server;
  app: express.Express;
  db: Db;
  env: Env;
  logger: Logger;
  manager: ReservoirManager;
  parsePool: ParsePool;
  github: GitHubConfig;
  mail: Mail;
  /** The UDP/TCP listeners and their decode worker. */
  collection: Collection;
  snapshots: SnapshotCache;
  /** Settles when the background warm-up of recent windows has ended (null: off or failed). */
  warmed: Promise<WarmReport | null>;
  /** Stops accepting connections, lets in-flight requests finish, then closes the database. */
  close(): Promise<void>;
}

/**
 * Opens the database, applies pending migrations, and serves the app: through Vite
 * middleware in development (and tests), from `build/` in production. Resolves once the
 * server is listening.
 */
export async function startServer(options: StartServerOptions = {}): Promise<WeirServer> {
  const env = options.env ?? loadEnv();
  const logger = options.logger ?? createLogger(env.LOG_LEVEL);
  const production = env.NODE_ENV === "production";
  // The environment check refuses this too; an env object built by hand must not slip past it.
  if (env.WEIR_DEMO && (env.GITHUB_CLIENT_ID || env.GITHUB_CLIENT_SECRET || env.SMTP_URL)) {
    throw new Error("demo mode (WEIR_DEMO=1) never runs with real GitHub OAuth credentials or SMTP_URL");
  }
  if (env.WEIR_DEMO) logger.warn(DEMO_BANNER);

  const db = await createDb(env.DATABASE_URL, env.DATABASE_AUTH_TOKEN);
  let vite: ViteDevServer | undefined;
  let parsePool: ParsePool | undefined;
  let collection: Collection | undefined;
  const fakes: { close(): Promise<void> }[] = [];
  try {
    const github = await githubConfig(env, fakes, logger);
    const mail = await mailService(env, fakes, logger);
    await runMigrations(db);
    logger.info("database migrated");
    const manager = new ReservoirManager(db, {
      node: env.NODE_ID,
      uniform: options.uniform,
      idempotencyTtlMs: env.IDEMPOTENCY_TTL_HOURS * 3600_000,
      now: options.now,
      timeBounds: {
        futureToleranceMs: env.INGEST_FUTURE_TOLERANCE_SECONDS * 1000,
        floorMs: env.INGEST_TIME_FLOOR,
        refuseExpired: env.INGEST_REFUSE_EXPIRED,
      },
    });
    // Started here, not in route code: the route bundle cannot point at a worker file.
    const pool = (parsePool = await ParsePool.start({ size: env.INGEST_PARSE_WORKERS, logger, maxQueuedBytes: env.INGEST_PARSE_QUEUE_BYTES }));

    const envPort = (port: number) => (port === 0 ? null : port);
    const collect = options.collect ?? {};
    const listeners = (collection = await Collection.start({
      db,
      manager,
      logger,
      host: env.COLLECT_HOST ?? options.host ?? env.HOST,
      ipfixUdpPort: collect.ipfixUdpPort !== undefined ? collect.ipfixUdpPort : envPort(env.IPFIX_UDP_PORT),
      netflowUdpPort: collect.netflowUdpPort !== undefined ? collect.netflowUdpPort : envPort(env.NETFLOW_UDP_PORT),
      ipfixTcpPort: collect.ipfixTcpPort !== undefined ? collect.ipfixTcpPort : envPort(env.IPFIX_TCP_PORT),
      receiveBufferBytes: env.COLLECT_UDP_RECEIVE_BUFFER_BYTES,
      templateLifetimeMs: env.IPFIX_TEMPLATE_LIFETIME_SECONDS * 1000,
      flushRecords: env.COLLECT_FLUSH_RECORDS,
      flushMs: collect.flushMs ?? env.COLLECT_FLUSH_MS,
      maxBufferedRecords: env.COLLECT_MAX_BUFFERED_RECORDS,
      statsIntervalMs: collect.statsIntervalMs,
    }));

    const snapshots = new SnapshotCache();
    const app = express();
    app.disable("x-powered-by");
    // Created before Vite so its HMR socket can share this port: a second fixed port would
    // collide between a dev server and a test run on the same machine. Later WebSocket
    // endpoints attach to this server's `upgrade` event the same way.
    const httpServer = createServer(app);

    let build: ServerBuild | (() => Promise<ServerBuild>);
    if (production) {
      build = await loadProductionBuild(app);
    } else {
      const { createServer: createViteServer } = await import("vite");
      vite = await createViteServer({
        root: PROJECT_ROOT,
        server: { middlewareMode: true, hmr: { server: httpServer } },
      });
      app.use(vite.middlewares);
      const devServer = vite;
      // Loaded per request so edits to routes show up without a restart.
      build = () =>
        devServer.ssrLoadModule("virtual:react-router/server-build") as Promise<ServerBuild>;
    }

    // After the asset handlers, so only application requests are logged.
    app.use(requestLog(logger));
    app.all(
      "/{*splat}",
      createRequestHandler({
        build,
        mode: production ? "production" : "development",
        getLoadContext: () => ({ db, env, logger, manager, parsePool: pool, github, mail, collection: listeners, snapshots }),
      }),
    );
    app.use(lastResortErrorHandler(logger));

    const port = await listen(httpServer, options.port ?? env.PORT, options.host ?? env.HOST);
    const host = options.host ?? env.HOST;
    const url = `http://${host.includes(":") ? `[${host}]` : host}:${port}`;

    const retention = startRetentionTimer(
      { db, manager, node: env.NODE_ID, logger },
      { ...options.retention, intervalMs: options.retention?.intervalMs ?? env.RETENTION_INTERVAL_MINUTES * 60_000 },
    );
    const calibration = startCalibrationTimer(
      { db, logger },
      { ...options.calibration, intervalMs: options.calibration?.intervalMs ?? env.CALIBRATION_INTERVAL_MINUTES * 60_000 },
    );
    const packing = startPackTimer(
      { db, logger },
      { firstRunDelayMs: PACK_FIRST_RUN_DELAY_MS, ...options.pack, intervalMs: options.pack?.intervalMs ?? env.PACK_INTERVAL_SECONDS * 1000 },
    );
    let closing: Promise<void> | undefined;
    // The first question after a start is usually about the last day: read it into the cache
    // now, in steps between which requests are served, rather than in that question's time.
    const warmStartedAt = performance.now();
    const warmed: Promise<WarmReport | null> =
      options.warm === false
        ? Promise.resolve(null)
        : warmRecentWindows({ db, manager, snapshots }, { now: Date.now(), stopped: () => closing !== undefined }).then(
            (report) => {
              logger.info({ ...report, ms: Math.round(performance.now() - warmStartedAt) }, "recent windows read into the snapshot cache");
              return report;
            },
            (error: unknown) => {
              logger.warn({ err: error }, "reading recent windows ahead failed; queries read them from SQLite as usual");
              return null;
            },
          );
    const close = () => {
      // The pool closes after shutDown has drained the HTTP server, so no request loses its parser.
      // A retention run stops after its current transaction, a packing run after its current step, and a calibration run ends, before the database closes.
      // The listeners stop and store what they buffered before the database closes.
      closing ??= Promise.all([retention.stop(), calibration.stop(), packing.stop(), warmed])
        .then(() => listeners.close())
        .then(() => shutDown(httpServer, vite, db, logger, manager))
        .then(() => pool.close())
        .then(() => closeAll(fakes));
      return closing;
    };
    return { url, port, httpServer, app, db, env, logger, manager, parsePool: pool, github, mail, collection: listeners, snapshots, warmed, close };
  } catch (error) {
    await vite?.close();
    await parsePool?.close();
    await collection?.close();
    await closeAll(fakes);
    closeDb(db);
    throw error;
  }
}

/**
 * GitHub sign-in: the real one when an OAuth app is configured; otherwise (never in
 * production outside demo mode: the environment check refuses that) a local fake GitHub on
 * a free loopback port, started here so development, the demo and tests sign in the same way.
 */
async function githubConfig(env: Env, fakes: { close(): Promise<void> }[], logger: Logger): Promise<GitHubConfig> {
  if (env.GITHUB_CLIENT_ID && env.GITHUB_CLIENT_SECRET) {
    return { clientId: env.GITHUB_CLIENT_ID, clientSecret: env.GITHUB_CLIENT_SECRET, oauthUrl: env.GITHUB_OAUTH_URL, apiUrl: env.GITHUB_API_URL, fake: false };
  }
  if (env.NODE_ENV === "production" && !env.WEIR_DEMO) throw new Error("GitHub OAuth credentials are required in production");
  const { startFakeGitHub } = await import("../../scripts/fakes/github");
  const fake = await startFakeGitHub();
  fakes.push(fake);
  logger.info({ url: fake.url }, "fake GitHub started for development sign-in");
  return { clientId: "weir-dev", clientSecret: "weir-dev-secret", oauthUrl: fake.url, apiUrl: fake.url, fake: true };
}

/**
 * Outgoing mail: the configured SMTP relay; otherwise (never in production outside demo
 * mode, which requires SMTP_URL) a local fake SMTP server that catches messages for
 * /dev/mail and tests.
 */
async function mailService(env: Env, fakes: { close(): Promise<void> }[], logger: Logger): Promise<Mail> {
  if (env.SMTP_URL) return createMail({ smtpUrl: env.SMTP_URL, from: env.MAIL_FROM });
  if (env.NODE_ENV === "production" && !env.WEIR_DEMO) throw new Error("SMTP_URL is required in production");
  const { startFakeSmtp } = await import("../../scripts/fakes/smtp");
  const fake = await startFakeSmtp();
  fakes.push(fake);
  logger.info({ port: fake.port }, "fake SMTP server started for development mail");
  return createMail({ fake, from: env.MAIL_FROM });
}

async function closeAll(fakes: { close(): Promise<void> }[]): Promise<void> {
  await Promise.all(fakes.map((f) => f.close()));
}

async function loadProductionBuild(app: express.Express): Promise<ServerBuild> {
  const serverEntry = join(PROJECT_ROOT, "build/server/index.js");
  if (!existsSync(serverEntry)) {
    throw new Error("No production build found; run `npm run build` first");
  }
  const clientDir = join(PROJECT_ROOT, "build/client");
  // File names under /assets carry a content hash, so browsers may keep them forever.
  app.use("/assets", express.static(join(clientDir, "assets"), { immutable: true, maxAge: "1y" }));
  app.use(express.static(clientDir, { maxAge: "1h" }));
  return (await import(pathToFileURL(serverEntry).href)) as ServerBuild;
}

function listen(server: Server, port: number, host: string): Promise<number> {
  return new Promise((resolve, reject) => {
    server.once("error", reject);
    server.listen(port, host, () => {
      server.off("error", reject);
      resolve((server.address() as AddressInfo).port);
    });
  });
}

async function shutDown(
  server: Server,
  vite: ViteDevServer | undefined,
  db: Db,
  logger: Logger,
  manager: ReservoirManager,
): Promise<void> {
  logger.info("shutting down");
  const closed = new Promise<void>((resolve) => server.close(() => resolve()));
  // Requests still running after the grace period are cut off rather than holding the
  // process open forever (a stuck client must not block a deploy).
  const force = setTimeout(() => server.closeAllConnections(), SHUTDOWN_GRACE_MS);
  force.unref();
  // Vite's HMR sockets are long-lived; closing Vite ends them so `server.close` can finish.
  await vite?.close();
  await closed;
  clearTimeout(force);
  // Batches already acknowledged are committed; let any still being applied finish.
  await manager.idle();
  closeDb(db);
  logger.info("stopped");
}

function requestLog(logger: Logger): RequestHandler {
  return (req, res, next) => {
    const startedAt = performance.now();
    res.on("finish", () => {
      logger.info(
        {
          method: req.method,
          path: req.path,
          status: res.statusCode,
          ms: Math.round(performance.now() - startedAt),
        },
        "request",
      );
    });
    next();
  };
}

// React Router answers its own errors; this only catches failures outside it.
function lastResortErrorHandler(logger: Logger): ErrorRequestHandler {
  return (error, req, res, next) => {
    logger.error({ err: error, method: req.method, path: req.path }, "unhandled request error");
    if (res.headersSent) return next(error);
    res.status(500).json({ error: "internal_error" });
  };
}

/** Closes the server gracefully on SIGTERM or SIGINT, then exits (1 when shutdown fails). */
export function closeOnSignals(server: WeirServer): void {
  for (const signal of ["SIGTERM", "SIGINT"] as const) {
    process.once(signal, () => {
      server.close().then(
        () => process.exit(0),
        (error: unknown) => {
          server.logger.error({ err: error }, "shutdown failed");
          process.exit(1);
        },
      );
    });
  }
}
