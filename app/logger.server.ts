import { pino, type Logger } from "pino";
import type { Env } from "./env.server";

export type { Logger };

/** The one way Weir makes a logger: JSON lines on stdout, for log shippers to parse. */
export function createLogger(level: Env["LOG_LEVEL"]): Logger {
  return pino({ name: "weir", level });
}
