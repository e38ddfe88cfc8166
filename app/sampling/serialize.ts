import { z } from "zod";
import type { ReservoirState } from "./reservoir";

/** Version of the plain-JSON reservoir form; bump it on any incompatible change. */
export const RESERVOIR_JSON_VERSION = 1;

/** The plain-JSON form of a reservoir: what storage and sample files carry. */
export interface ReservoirJson<J = unknown> {
  format: "weir.reservoir";
  version: typeof RESERVOIR_JSON_VERSION;
  k: number;
  tau: number;
  seen: number;
  /** Highest priority first. */
  kept: { priority: number; weight: number; record: J }[];
}

const POSITIVE = "must be a number above 0";
const positiveFinite = z.number({ error: POSITIVE }).positive({ error: POSITIVE }).finite({ error: POSITIVE });
const WHOLE = "must be a whole number of at least 0";

const reservoirJsonSchema = z
  .object({
    format: z.literal("weir.reservoir"),
    version: z.literal(RESERVOIR_JSON_VERSION, { error: `unsupported version: this Weir reads version ${RESERVOIR_JSON_VERSION}` }),
    k: z.number({ error: "must be a whole number of at least 1" }).int({ error: "must be a whole number of at least 1" }).positive({ error: "must be a whole number of at least 1" }),
    tau: z.number({ error: "must be a number of at least 0" }).nonnegative({ error: "must be a number of at least 0" }).finite({ error: "must be a number of at least 0" }),
    seen: z.number({ error: WHOLE }).int({ error: WHOLE }).nonnegative({ error: WHOLE }),
    kept: z.array(z.object({ priority: positiveFinite, weight: positiveFinite, record: z.unknown() })),
  })
  .superRefine((r, ctx) => {
    // Invariants of a priority sample (DLT 2007): at most k kept; every kept
    // priority beats τ; q = w/u with u ≤ 1 so q ≥ w; and τ > 0 only once more
    // than k records were seen.
    if (r.kept.length > r.k) ctx.addIssue({ code: "custom", path: ["kept"], message: `holds ${r.kept.length} records but k is ${r.k}` });
    if (r.seen < r.kept.length) ctx.addIssue({ code: "custom", path: ["seen"], message: `is ${r.seen}, fewer than the ${r.kept.length} kept records` });
    if (r.kept.length < r.k && r.tau > 0) ctx.addIssue({ code: "custom", path: ["tau"], message: "must be 0 while fewer than k records are kept" });
    if (r.kept.length < r.k && r.seen !== r.kept.length) ctx.addIssue({ code: "custom", path: ["seen"], message: "must equal the kept count while fewer than k records are kept" });
    r.kept.forEach((entry, i) => {
      if (entry.priority < r.tau) ctx.addIssue({ code: "custom", path: ["kept", i, "priority"], message: `${entry.priority} is below τ = ${r.tau}` });
      if (entry.priority < entry.weight) ctx.addIssue({ code: "custom", path: ["kept", i, "priority"], message: `${entry.priority} is below its weight ${entry.weight} (a priority is w/u with u ≤ 1)` });
    });
  });

/** A reservoir document that failed validation; `issues` name each path. */
export class ReservoirJsonError extends Error {
  constructor(readonly issues: { path: string; message: string }[]) {
    super(issues.map((i) => `${i.path || "(document)"}: ${i.message}`).join("; "));
    this.name = "ReservoirJsonError";
  }
}

/**
 * Writes a reservoir state as versioned plain JSON. Numbers are JS doubles,
 * which JSON.stringify writes in shortest round-trip form (ECMA-262
 * Number::toString), so the form round-trips exactly.
 *
 * @example
 * reservoirToJson({ k: 2, tau: 0, seen: 1, kept: [{ item: 7, weight: 3, priority: 6 }] }, (n) => n)
 * // { format: "weir.reservoir", version: 1, k: 2, tau: 0, seen: 1, kept: [{ priority: 6, weight: 3, record: 7 }] }
 */
export function reservoirToJson<T, J>(state: ReservoirState<T>, encode: (item: T) => J): ReservoirJson<J> {
  return {
    format: "weir.reservoir",
    version: RESERVOIR_JSON_VERSION,
    k: state.k,
    tau: state.tau,
    seen: state.seen,
    kept: [...state.kept].sort((a, b) => b.priority - a.priority).map((e) => ({ priority: e.priority, weight: e.weight, record: encode(e.item) })),
  };
}

/**
 * Reads the versioned JSON form back, checking the invariants of a priority
 * sample; `decode` turns each record back into an item and may throw, which is
 * reported with the record's path. Throws ReservoirJsonError.
 *
 * @example reservoirFromJson(reservoirToJson(state, encode), decode) // deep-equals state
 */
export function reservoirFromJson<T>(json: unknown, decode: (record: unknown) => T): ReservoirState<T> {
  const parsed = reservoirJsonSchema.safeParse(json);
  if (!parsed.success) {
    throw new ReservoirJsonError(parsed.error.issues.map((i) => ({ path: i.path.join("."), message: i.message })));
  }
  const issues: { path: string; message: string }[] = [];
  const kept = parsed.data.kept.map((e, i) => {
    try {
      return { item: decode(e.record), weight: e.weight, priority: e.priority };
    } catch (error) {
      issues.push({ path: `kept.${i}.record`, message: error instanceof Error ? error.message : String(error) });
      return undefined;
    }
  });
  if (issues.length > 0) throw new ReservoirJsonError(issues);
  const { k, tau, seen } = parsed.data;
  return { k, tau, seen, kept: kept as { item: T; weight: number; priority: number }[] };
}
