/**
 * The sample file: a versioned JSON document that carries the priority samples of one
 * tenant's windows out of Weir (export) and, later, back in (upload, merge). One entry per
 * reservoir, i.e. per (collector, window, node), with its k, τ, the kept records with their
 * priorities and weights, and the window's exact counters. No tenant id appears anywhere:
 * the file is the tenant's data, and whoever imports it decides where it goes.
 *
 * Each window is a priority sample (Duffield, Lund, Thorup, "Priority sampling for
 * estimation of arbitrary subset sums", J. ACM 54(6), 2007); `parseSampleFile` checks its
 * invariants with the same checks as the stored reservoir form (`reservoirFromJson`), plus
 * what only a window knows: alignment, exact counters, weights that are the records' own
 * counters. docs/sample-file.md describes every field.
 *
 * Pure module: no I/O, usable in the browser and on the server.
 */
import { z } from "zod";
import { flowRecordToJson, parseFlowRecord, type FlowRecord, type FlowRecordJson } from "../flow/record.ts";
import { ReservoirJsonError, RESERVOIR_JSON_VERSION, reservoirFromJson, reservoirToJson } from "../sampling/serialize.ts";

export const SAMPLE_FILE_FORMAT = "weir.samples";
/** Version of the sample file; bump it on any incompatible change. */
export const SAMPLE_FILE_VERSION = 1;
/** Longest window a file may carry: a year of 366 days, room for rolled-up windows. */
export const MAX_WINDOW_SECONDS = 366 * 86_400;

export type WeightAttribute = "bytes" | "packets";

/** How a window's sample came to be. */
export interface SampleProvenance {
  /** The Weir node that sampled it (several nodes may sample one collector at once). */
  node: string;
  /** The counter each record was weighted by. */
  weightAttribute: WeightAttribute;
  /** When the sample last changed, epoch ms. */
  updatedAt: number;
}

/** One reservoir: the priority sample of one (collector, window, node). */
export interface SampleWindow {
  collector: string;
  /** Epoch ms, a multiple of windowSeconds · 1000. */
  windowStart: number;
  windowSeconds: number;
  k: number;
  /** The (k+1)-th highest priority seen; 0 while at most k records were seen. */
  tau: number;
  /** Records offered to the sample in all. */
  seen: number;
  /** Exact sums over every record seen in the window, kept or not. */
  exact: { records: bigint; bytes: bigint; packets: bigint };
  /** Highest priority first. */
  kept: { priority: number; weight: number; record: FlowRecord }[];
  provenance: SampleProvenance;
}

/** A parsed sample file. Times are epoch ms; it holds the windows whose start lies in [from, to). */
export interface SampleSet {
  exportedAt: number;
  from: number;
  to: number;
  windows: SampleWindow[];
}

/** An exact counter in JSON: a number up to 2^53 − 1, a decimal string beyond. */
export type CounterJson = number | string;

/** The sample file as JSON text carries it. */
export interface SampleFile {
  format: typeof SAMPLE_FILE_FORMAT;
  version: typeof SAMPLE_FILE_VERSION;
  exportedAt: string;
  from: string;
  to: string;
  windows: {
    collector: string;
    windowStart: string;
    windowSeconds: number;
    k: number;
    tau: number;
    seen: number;
    exact: { records: CounterJson; bytes: CounterJson; packets: CounterJson };
    kept: { priority: number; weight: number; record: FlowRecordJson }[];
    provenance: { node: string; weightAttribute: WeightAttribute; updatedAt: string };
  }[];
}

/** One problem with a sample file; `path` is a JSON path such as `windows[2].kept[0].priority`. */
export interface SampleFileIssue {
  path: string;
  message: string;
}

/** A sample file that failed to parse; `issues` name each path. */
export class SampleFileError extends Error {
  constructor(readonly issues: SampleFileIssue[]) {
    super(issues.map((i) => `${i.path || "(document)"}: ${i.message}`).join("; "));
    this.name = "SampleFileError";
  }
}

// ---- leaf values ---------------------------------------------------------------------------

const TIME_FORM = "an ISO 8601 UTC time such as 2024-05-01T02:00:00Z";
const UTC_PATTERN = /^\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}(?:\.\d{1,3})?Z$/;

const utcTime = z.string({ error: `must be ${TIME_FORM}` }).transform((text, ctx): number => {
  const ms = UTC_PATTERN.test(text) ? Date.parse(text) : Number.NaN;
  // Date.parse rolls 31 April over into 1 May; comparing the fields back catches it.
  if (Number.isNaN(ms) || new Date(ms).toISOString().slice(0, 19) !== text.slice(0, 19)) {
    ctx.addIssue({ code: "custom", message: `must be ${TIME_FORM}, not ${JSON.stringify(text).slice(0, 40)}` });
    return z.NEVER;
  }
  if (ms < 0) {
    ctx.addIssue({ code: "custom", message: "is before 1970-01-01T00:00:00Z" });
    return z.NEVER;
  }
  return ms;
});

const COUNTER_FORM = "must be a non-negative whole number (a decimal string above 2^53 − 1)";

/**
 * Exact counters: sums of unsigned 64-bit counters (RFC 7012), which pass 2^53 − 1, where
 * JSON numbers stop being exact, and may pass 2^64 too; hence decimal strings beyond.
 */
const counter = z.unknown().transform((value, ctx): bigint => {
  if (typeof value === "number" && Number.isSafeInteger(value) && value >= 0) return BigInt(value);
  if (typeof value === "string" && /^\d{1,40}$/.test(value)) return BigInt(value);
  const shown = typeof value === "number" || typeof value === "string" ? `, not ${JSON.stringify(value).slice(0, 40)}` : "";
  ctx.addIssue({ code: "custom", message: `${COUNTER_FORM}${shown}` });
  return z.NEVER;
});

const name = (what: string) =>
  z
    .string({ error: `must be ${what}` })
    .min(1, { error: `must be ${what}, not empty` })
    .max(64, { error: `must be ${what} of at most 64 characters` });

const provenanceSchema = z.strictObject(
  {
    node: name("a node id"),
    weightAttribute: z.enum(["bytes", "packets"], { error: 'must be "bytes" or "packets"' }),
    updatedAt: utcTime,
  },
  { error: "must be an object with node, weightAttribute and updatedAt" },
);

// ---- one window ----------------------------------------------------------------------------------

/** Segments of a dotted `reservoirFromJson` path (`kept.1.priority`) as a zod path. */
function pathOf(dotted: string): (string | number)[] {
  return dotted === "" ? [] : dotted.split(".").map((s) => (/^\d+$/.test(s) ? Number(s) : s));
}

/** Decodes a kept record, throwing the record's own issues (field name as written). */
function decodeRecord(json: unknown): FlowRecord {
  const result = parseFlowRecord(json);
  if (result.ok) return result.record;
  throw new Error(result.issues.map((i) => (i.path === "" ? i.message : `${i.path}: ${i.message}`)).join("; "));
}

const windowSchema = z
  .strictObject(
    {
      collector: name("a collector name"),
      windowStart: utcTime,
      windowSeconds: z
        .int({ error: `must be a whole number of seconds from 1 to ${MAX_WINDOW_SECONDS}` })
        .min(1, { error: `must be a whole number of seconds from 1 to ${MAX_WINDOW_SECONDS}` })
        .max(MAX_WINDOW_SECONDS, { error: `must be a whole number of seconds from 1 to ${MAX_WINDOW_SECONDS}` }),
      // k, tau, seen and kept are checked together by reservoirFromJson below.
      k: z.unknown(),
      tau: z.unknown(),
      seen: z.unknown(),
      exact: z.strictObject({ records: counter, bytes: counter, packets: counter }, { error: "must be an object with records, bytes and packets" }),
      kept: z.unknown(),
      provenance: provenanceSchema,
    },
    { error: "must be a window object" },
  )
  .transform((w, ctx): SampleWindow => {
    let state;
    try {
      state = reservoirFromJson(
        { format: "weir.reservoir", version: RESERVOIR_JSON_VERSION, k: w.k, tau: w.tau, seen: w.seen, kept: w.kept },
        decodeRecord,
      );
    } catch (error) {
      if (!(error instanceof ReservoirJsonError)) throw error;
      for (const issue of error.issues) ctx.addIssue({ code: "custom", path: pathOf(issue.path), message: issue.message });
      return z.NEVER;
    }
    const issue = (path: (string | number)[], message: string) => ctx.addIssue({ code: "custom", path, message });

    // Windows are aligned to the Unix epoch (app/ingest/window.ts), so every node agrees on them.
    const windowMs = w.windowSeconds * 1000;
    if (w.windowStart % windowMs !== 0) {
      const aligned = new Date(Math.floor(w.windowStart / windowMs) * windowMs).toISOString();
      issue(["windowStart"], `is not a multiple of windowSeconds (${w.windowSeconds} s) since 1970-01-01T00:00:00Z; the window holding it starts at ${aligned}`);
    }
    if (w.exact.records !== BigInt(state.seen)) {
      issue(["exact", "records"], `is ${w.exact.records}, but seen is ${state.seen}: both count every record offered to the sample`);
    }
    let keptBytes = 0n;
    let keptPackets = 0n;
    state.kept.forEach((entry, i) => {
      const r = entry.item;
      keptBytes += r.bytes;
      keptPackets += r.packets;
      // The weight is the record's own counter, rounded to a double once (as ingest does).
      const counterValue = Number(w.provenance.weightAttribute === "bytes" ? r.bytes : r.packets);
      if (entry.weight !== counterValue) {
        issue(["kept", i, "weight"], `is ${entry.weight}, but the record's ${w.provenance.weightAttribute} is ${counterValue} (provenance.weightAttribute)`);
      }
      if (r.start !== null && (r.start < w.windowStart || r.start >= w.windowStart + windowMs)) {
        issue(["kept", i, "record", "start"], `${new Date(r.start).toISOString()} lies outside the window ${new Date(w.windowStart).toISOString()} + ${w.windowSeconds} s`);
      }
    });
    // Kept records are some of the records seen, so their counters cannot exceed the window's.
    if (keptBytes > w.exact.bytes) issue(["exact", "bytes"], `is ${w.exact.bytes}, less than the ${keptBytes} bytes of the kept records alone`);
    if (keptPackets > w.exact.packets) issue(["exact", "packets"], `is ${w.exact.packets}, less than the ${keptPackets} packets of the kept records alone`);

    return {
      collector: w.collector,
      windowStart: w.windowStart,
      windowSeconds: w.windowSeconds,
      k: state.k,
      tau: state.tau,
      seen: state.seen,
      exact: w.exact,
      kept: state.kept.map((e) => ({ priority: e.priority, weight: e.weight, record: e.item })),
      provenance: w.provenance,
    };
  });

// ---- the document --------------------------------------------------------------------------------

/** Format and version alone, checked first: a newer file gets one clear message, not a cascade. */
const headerSchema = z.object(
  {
    format: z.literal(SAMPLE_FILE_FORMAT, { error: `must be "${SAMPLE_FILE_FORMAT}": this is not a Weir sample file` }),
    version: z.literal(SAMPLE_FILE_VERSION, { error: `is not a version this Weir reads (it reads version ${SAMPLE_FILE_VERSION})` }),
  },
  { error: "a sample file must be a JSON object" },
);

/** The sample file schema: parses a `SampleFile` into a `SampleSet`, checking every invariant. */
export const sampleFileSchema = z
  .strictObject({
    format: z.literal(SAMPLE_FILE_FORMAT),
    version: z.literal(SAMPLE_FILE_VERSION),
    exportedAt: utcTime,
    from: utcTime,
    to: utcTime,
    windows: z.array(windowSchema, { error: "must be a list of windows" }),
  })
  .transform((doc, ctx): SampleSet => {
    if (doc.to <= doc.from) ctx.addIssue({ code: "custom", path: ["to"], message: `must be after from (${new Date(doc.from).toISOString()})` });
    const seen = new Map<string, number>();
    doc.windows.forEach((w, i) => {
      if (w.windowStart < doc.from || w.windowStart >= doc.to) {
        ctx.addIssue({ code: "custom", path: ["windows", i, "windowStart"], message: "lies outside [from, to): the file holds the windows that start in that range" });
      }
      // Two entries for one reservoir would count its records twice in any estimate or merge.
      const key = JSON.stringify([w.collector, w.windowStart, w.windowSeconds, w.provenance.node]);
      const first = seen.get(key);
      if (first !== undefined) {
        ctx.addIssue({ code: "custom", path: ["windows", i], message: `repeats windows[${first}] (same collector, windowStart, windowSeconds and node)` });
      } else {
        seen.set(key, i);
      }
    });
    return { exportedAt: doc.exportedAt, from: doc.from, to: doc.to, windows: doc.windows };
  });

function formatPath(path: readonly PropertyKey[]): string {
  let text = "";
  for (const segment of path) {
    if (typeof segment === "number") text += `[${segment}]`;
    else text += text === "" ? String(segment) : `.${String(segment)}`;
  }
  return text;
}

function issuesOf(error: z.ZodError): SampleFileIssue[] {
  return error.issues.flatMap((i) =>
    i.code === "unrecognized_keys"
      ? i.keys.map((key) => ({ path: formatPath([...i.path, key.length > 64 ? `${key.slice(0, 64)}…` : key]), message: "is not a field of a version 1 sample file" }))
      : [{ path: formatPath(i.path), message: i.message }],
  );
}

/**
 * Parses a sample file, given as JSON text or as an already parsed value, checking the
 * invariants of a priority sample in every window. Throws SampleFileError, whose issues
 * name the JSON path of each problem.
 *
 * @example parseSampleFile('{"format":"weir.samples","version":1,"exportedAt":"2024-05-01T03:00:00Z","from":"2024-05-01T02:00:00Z","to":"2024-05-01T02:05:00Z","windows":[]}')
 *   // { exportedAt: 1714532400000, from: 1714528800000, to: 1714529100000, windows: [] }
 * @example parseSampleFile({ format: "weir.samples", version: 2 })
 *   // throws SampleFileError("version: is not a version this Weir reads (it reads version 1)")
 */
export function parseSampleFile(input: unknown): SampleSet {
  let json = input;
  if (typeof input === "string") {
    try {
      json = JSON.parse(input);
    } catch (error) {
      throw new SampleFileError([{ path: "", message: `is not complete JSON text (${(error as Error).message})` }]);
    }
  }
  const header = headerSchema.safeParse(json);
  if (!header.success) throw new SampleFileError(issuesOf(header.error));
  const parsed = sampleFileSchema.safeParse(json);
  if (!parsed.success) throw new SampleFileError(issuesOf(parsed.error));
  return parsed.data;
}

function counterJson(value: bigint): CounterJson {
  return value <= BigInt(Number.MAX_SAFE_INTEGER) ? Number(value) : value.toString();
}

/**
 * Writes a sample set as a sample file: times as ISO 8601 UTC, counters as numbers up to
 * 2^53 − 1 and decimal strings beyond, records under Weir's aliases (`flowRecordToJson`),
 * kept records highest priority first. `parseSampleFile` of the result gives back an equal
 * set (with kept records in that order).
 *
 * @example toSampleFile({ exportedAt: 1714532400000, from: 1714528800000, to: 1714529100000, windows: [] })
 *   // { format: "weir.samples", version: 1, exportedAt: "2024-05-01T03:00:00.000Z", from: "2024-05-01T02:00:00.000Z", to: "2024-05-01T02:05:00.000Z", windows: [] }
 */
export function toSampleFile(set: SampleSet): SampleFile {
  const iso = (ms: number) => new Date(ms).toISOString();
  return {
    format: SAMPLE_FILE_FORMAT,
    version: SAMPLE_FILE_VERSION,
    exportedAt: iso(set.exportedAt),
    from: iso(set.from),
    to: iso(set.to),
    windows: set.windows.map((w) => {
      const sample = reservoirToJson(
        { k: w.k, tau: w.tau, seen: w.seen, kept: w.kept.map((e) => ({ item: e.record, weight: e.weight, priority: e.priority })) },
        flowRecordToJson,
      );
      return {
        collector: w.collector,
        windowStart: iso(w.windowStart),
        windowSeconds: w.windowSeconds,
        k: sample.k,
        tau: sample.tau,
        seen: sample.seen,
        exact: { records: counterJson(w.exact.records), bytes: counterJson(w.exact.bytes), packets: counterJson(w.exact.packets) },
        kept: sample.kept,
        provenance: { node: w.provenance.node, weightAttribute: w.provenance.weightAttribute, updatedAt: iso(w.provenance.updatedAt) },
      };
    }),
  };
}
