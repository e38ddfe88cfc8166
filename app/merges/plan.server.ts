import type { InValue } from "@libsql/client";
import { ApiError } from "~/auth/api-keys.server";
import type { Db } from "~/db/client.server";
import { mergeWindowStates, readStoredWindows, type StoredWindow, type WindowState } from "~/samples/store.server";
import { copiesAndMerges } from "~/query/collector-kinds.server";
import { overlapsOf } from "~/query/collector-rule";
import type { MergeRequest } from "./request.server";

/**
 * Kept records one merge may read. Each is decoded into an object of a few hundred bytes,
 * so this bounds a merge to some hundreds of megabytes of input, read a slice at a time.
 */
export const MAX_KEPT_PER_MERGE = 2_000_000;

/** Kept records read at once: the windows of one slice of the range are merged before the next is read. */
const KEPT_PER_READ = 200_000;

/** What a merge needs of its tenant. */
export interface MergeTenant {
  id: number;
  /** The tenant's k: the sample size when the request names none. */
  sampleSize: number;
  /** Coordinated priorities: a flow kept by two collectors is counted once. */
  coordinated: boolean;
}

/** One merged window: the merge of every input reservoir (every collector and node) of that window. */
export interface MergedWindowPlan {
  windowStart: number;
  windowSeconds: number;
  /** Input reservoirs merged. */
  inputs: number;
  duplicatesDropped: number;
  /** The merged sample: k, τ, kept records, and the exact records seen by the inputs (less the duplicates found, for coordinated tenants). */
  state: WindowState;
}

export interface MergeTotals {
  windows: number;
  kept: number;
  records: number;
  duplicatesDropped: number;
}

export interface MergePlan {
  name: string;
  collectors: string[];
  collectorIds: number[];
  from: number;
  to: number;
  sampleSize: number;
  coordinated: boolean;
  windows: MergedWindowPlan[];
  totals: MergeTotals;
}

/**
 * The ids of the named collectors, which must all be stream collectors of the tenant.
 * Throws ApiError 422 naming every unknown collector and every merge among them: a merge
 * of merges would count the shared inputs' records twice whenever they overlap, and its
 * provenance would no longer say which streams went in. A copy with its origin (or two
 * copies of one origin) is refused the same way (`copy_with_origin`) unless `allowOverlap`.
 */
export async function resolveInputs(db: Db, tenantId: number, names: readonly string[], allowOverlap = false): Promise<number[]> {
  const found = await db.$client.execute({
    sql: `SELECT c.id, c.name, c.kind, m.inputs FROM collectors c LEFT JOIN merges m ON m.collector_id = c.id WHERE c.tenant_id = ? AND c.name IN (${names.map(() => "?").join(", ")})`,
    args: [tenantId, ...names],
  });
  const byName = new Map(found.rows.map((row) => [String(row[1]), { id: Number(row[0]), kind: String(row[2]), inputs: row[3] === null ? null : String(row[3]) }]));
  const details: { path: string; message: string }[] = [];
  names.forEach((name, i) => {
    const collector = byName.get(name);
    if (!collector) {
      details.push({ path: `collectors[${i}]`, message: `${name} is not a collector of this tenant` });
    } else if (collector.kind !== "stream") {
      const inputs = collector.inputs === null ? [] : (JSON.parse(collector.inputs) as string[]);
      details.push({
        path: `collectors[${i}]`,
        message: `${name} is a merge (of ${inputs.join(", ")}); a merge takes stream collectors only, so name its inputs instead`,
      });
    }
  });
  if (details.length > 0) {
    const more = details.length > 1 ? ` (and ${details.length - 1} more)` : "";
    throw new ApiError(422, "invalid_collectors", `Cannot merge: ${details[0].path}: ${details[0].message}${more}.`, { details });
  }
  // A copy (imported sample files) with its origin, or two copies of one origin: the merge
  // rule (DLT 2007) assumes disjoint streams, so their common records would count twice.
  const overlaps = overlapsOf(names, await copiesAndMerges(db, tenantId));
  if (overlaps.length > 0 && !allowOverlap) {
    const [first] = overlaps;
    const message = `${first.message}; merge one of them, or send allowOverlap: true if you know their records are disjoint`;
    throw new ApiError(422, first.code, `Cannot merge: collectors: ${message}.`, { details: overlaps.map((o) => ({ path: "collectors", message: o.message })) });
  }
  return names.map((name) => byName.get(name)!.id);
}

/**
 * Plans a merge: reads the stored reservoirs of the input collectors (every node's) whose
 * window starts in [from, to), groups them by (window start, window length) and merges
 * each group into one priority sample (Duffield, Lund, Thorup, J. ACM 54(6), 2007; see
 * mergeWindowStates): k_m = min(sample size, every input k), the k_m highest priorities
 * of the union, τ the (k_m+1)-th largest of those priorities and every input τ. For a
 * coordinated tenant a flow kept by several collectors is counted once. Nothing is
 * written. Throws ApiError 422 for unknown or merged inputs and for a range holding more
 * than MAX_KEPT_PER_MERGE kept records.
 */
export async function planMerge(db: Db, tenant: MergeTenant, request: MergeRequest): Promise<MergePlan> {
  const collectorIds = await resolveInputs(db, tenant.id, request.collectors, request.allowOverlap);
  const sampleSize = request.sampleSize ?? tenant.sampleSize;
  const slices = await readSlices(db, tenant.id, collectorIds, request.from, request.to);

  const windows: MergedWindowPlan[] = [];
  for (const slice of slices) {
    const stored = await readStoredWindows(db.$client, tenant.id, { from: slice.from, to: slice.to, collectorIds });
    for (const group of groupByWindow(stored)) {
      const { state, duplicatesDropped } = mergeWindowStates(group, sampleSize, tenant.coordinated);
      windows.push({
        windowStart: group[0].windowStart,
        windowSeconds: group[0].windowSeconds,
        inputs: group.length,
        duplicatesDropped,
        state,
      });
    }
  }

  const totals: MergeTotals = { windows: windows.length, kept: 0, records: 0, duplicatesDropped: 0 };
  for (const w of windows) {
    totals.kept += w.state.kept.length;
    totals.records += w.state.records;
    totals.duplicatesDropped += w.duplicatesDropped;
  }
  return {
    name: request.name,
    collectors: request.collectors,
    collectorIds,
    from: request.from,
    to: request.to,
    sampleSize,
    coordinated: tenant.coordinated,
    windows,
    totals,
  };
}

/** Reservoirs of one (window start, window length), as readStoredWindows orders them. */
function groupByWindow(stored: StoredWindow[]): StoredWindow[][] {
  const groups: StoredWindow[][] = [];
  for (const w of stored) {
    const last = groups.at(-1);
    if (last && last[0].windowStart === w.windowStart && last[0].windowSeconds === w.windowSeconds) last.push(w);
    else groups.push([w]);
  }
  return groups;
}

/**
 * Splits [from, to) at window starts into slices of about KEPT_PER_READ kept records, so
 * that the inputs of one slice are in memory at a time; refuses the whole range past
 * MAX_KEPT_PER_MERGE. A stored reservoir keeps min(k, records) records, so the count is exact.
 */
async function readSlices(db: Db, tenantId: number, collectorIds: number[], from: number, to: number): Promise<{ from: number; to: number }[]> {
  const args: InValue[] = [tenantId, from, to, ...collectorIds];
  const found = await db.$client.execute({
    sql:
      "SELECT window_start, sum(min(k, records)) FROM reservoirs " +
      `WHERE tenant_id = ? AND window_start >= ? AND window_start < ? AND records > 0 AND collector_id IN (${collectorIds.map(() => "?").join(", ")}) ` +
      "GROUP BY window_start ORDER BY window_start",
    args,
  });
  const starts = found.rows.map((row) => ({ windowStart: Number(row[0]), kept: Number(row[1]) }));
  const kept = starts.reduce((sum, s) => sum + s.kept, 0);
  if (kept > MAX_KEPT_PER_MERGE) {
    throw new ApiError(
      422,
      "merge_too_large",
      `The range holds ${kept} kept records in the chosen collectors; one merge reads at most ${MAX_KEPT_PER_MERGE}. Narrow from/to and merge the rest under another name.`,
      { limit: MAX_KEPT_PER_MERGE, kept, details: [{ path: "to", message: `covers more than ${MAX_KEPT_PER_MERGE} kept records` }] },
    );
  }
  const slices: { from: number; to: number }[] = [];
  let sliceStart = -1;
  let sliceKept = 0;
  for (const s of starts) {
    if (sliceStart < 0) sliceStart = s.windowStart;
    else if (sliceKept + s.kept > KEPT_PER_READ) {
      slices.push({ from: sliceStart, to: s.windowStart });
      sliceStart = s.windowStart;
      sliceKept = 0;
    }
    sliceKept += s.kept;
  }
  if (sliceStart >= 0) slices.push({ from: sliceStart, to });
  return slices;
}
