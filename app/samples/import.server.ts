import type { InStatement } from "@libsql/client";
import { promisify } from "node:util";
import { gunzip } from "node:zlib";
import { ApiError } from "~/auth/api-keys.server";
import type { Db } from "~/db/client.server";
import type { FlowRecord } from "~/flow/record";
import { readLimitedBody as readBody } from "~/http/limited-body.server";
import type { ReservoirManager } from "~/ingest/manager.server";
import { counterJson, type Counter } from "~/query/answer";
import { collectorNameSchema, ensureCollector } from "~/tenants.server";
import { SampleFileError, type SampleFileIssue, type SampleSet, type SampleWindow, type WeightAttribute } from "./document";
import { mergeWindowStates, putWindowStatements, readStoredWindows, type StoredWindow, type WindowState } from "./store.server";

/**
 * Importing a sample file (docs/sample-file.md, "Importing"): every window of the file
 * becomes a reservoir of one named collector of the tenant, merged with the reservoir that
 * collector already holds for the same window on this node. The merge is the plain one of
 * Duffield, Lund, Thorup ("Priority sampling for estimation of arbitrary subset sums",
 * J. ACM 54(6), 2007; app/sampling/merge.ts): it is valid because an import assumes the
 * file's records are not among the records the collector already saw. A file is applied
 * whole or not at all: one write transaction holds every reservoir and the ledger entry.
 */

const gunzipAsync = promisify(gunzip);

/** The largest sample size a tenant can choose (sampleSizeSchema); no Weir window keeps more. */
export const MAX_IMPORT_K = 65_536;

/** Issues listed in a 400 answer; the rest are counted. */
export const MAX_ISSUES_SHOWN = 50;

export interface ImportContext {
  db: Db;
  manager: ReservoirManager;
  /** This node's id: imported reservoirs are stored under it. */
  node: string;
}

export interface ImportSummary {
  collector: string;
  /** Reservoirs written (one per distinct windowStart and windowSeconds of the file). */
  windows: number;
  /** How many of those merged into a reservoir the collector already held. */
  mergedWithExisting: number;
  /** Kept records of the written reservoirs after the import. */
  kept: number;
  /** Records the file's windows saw, exactly (a decimal string above 2^53 − 1). */
  records: Counter;
  /** The file's range, ISO 8601 UTC. */
  from: string;
  to: string;
}

interface Group {
  windowStart: number;
  windowSeconds: number;
  /** Indexes into the file's windows, for the paths of issues. */
  indexes: number[];
  windows: SampleWindow[];
}

/**
 * Imports a parsed sample file into the collector `collectorName` of the tenant: the file's
 * windows, whatever their `collector` and node, are grouped by (windowStart, windowSeconds),
 * merged with this node's stored reservoir of that collector and window, and written under
 * this node. Exact counters add up exactly. Runs inside `manager.exclusive`, so no ingest
 * batch of this node interleaves, and writes everything plus the ledger entry in one
 * transaction. Each stored k is the smallest k of its inputs: the tenant's sampleSize is not
 * imposed (k wanted = ∞), so a file keeps the precision it was sampled with, and ingest into
 * such a window later goes on with that k.
 *
 * Throws MergedCollectorError when the name belongs to a merged collector (answer 409),
 * SampleFileError for windows that cannot be merged (answer 400) and ApiError otherwise;
 * in every case nothing is stored (the collector row of a new name aside).
 */
export async function importSampleSet(
  ctx: ImportContext,
  tenant: { id: number; sampleSize: number },
  collectorName: string,
  set: SampleSet,
  actor: { id: number | null; label: string },
): Promise<ImportSummary> {
  const groups = groupWindows(set.windows);
  return ctx.manager.exclusive(async () => {
    const collector = await ensureCollector(ctx.db, tenant.id, collectorName);
    const existing = await existingWindows(ctx, tenant.id, collector.id, groups);
    const now = Date.now();
    const statements: InStatement[] = [];
    let stored = 0;
    let mergedWithExisting = 0;
    let kept = 0;
    let records = 0n;

    for (const group of groups) {
      const before = existing.get(keyOf(group.windowStart, group.windowSeconds));
      const inputs: WindowState[] = group.windows.map(stateOfWindow);
      if (before) {
        checkExistingWeights(before, group, collector.name);
        inputs.push(before);
      }
      const total = inputs.reduce((sum, input) => sum + BigInt(input.records), 0n);
      if (total > BigInt(Number.MAX_SAFE_INTEGER)) {
        throw new ApiError(
          422,
          "counter_overflow",
          `The window ${new Date(group.windowStart).toISOString()} would count ${total} records, more than a reservoir can hold exactly (2^53 − 1).`,
        );
      }
      for (const w of group.windows) records += w.exact.records;
      // A window that saw no records stores nothing (ingest leaves such rows only by accident).
      if (total === 0n) continue;
      // Plain merge (no dedup, k = the smallest input k): the file's records are assumed
      // disjoint from the collector's own (DLT 2007 merge; see mergeWindowStates).
      const { state } = mergeWindowStates(inputs, Infinity, false);
      statements.push(...putWindowStatements(tenant.id, collector.id, { windowStart: group.windowStart, windowSeconds: group.windowSeconds, node: ctx.node }, state, now));
      stored += 1;
      if (before) mergedWithExisting += 1;
      kept += state.kept.length;
    }

    const summary: ImportSummary = {
      collector: collector.name,
      windows: stored,
      mergedWithExisting,
      kept,
      records: counterJson(records),
      from: new Date(set.from).toISOString(),
      to: new Date(set.to).toISOString(),
    };
    statements.push({
      sql: "INSERT INTO audit_log (tenant_id, actor_user_id, actor, action, target, detail, at) VALUES (?, ?, ?, ?, ?, ?, ?)",
      args: [tenant.id, actor.id, actor.label, "samples.import", collector.name, JSON.stringify(summary), now],
    });
    await ctx.db.$client.batch(statements, "write");
    return summary;
  });
}

const keyOf = (windowStart: number, windowSeconds: number) => `${windowStart}/${windowSeconds}`;

function stateOfWindow(w: SampleWindow): WindowState {
  return {
    k: w.k,
    tau: w.tau,
    records: w.seen,
    bytes: w.exact.bytes,
    packets: w.exact.packets,
    kept: w.kept.map((e) => ({ item: e.record, weight: e.weight, priority: e.priority })),
  };
}

/** True when every kept weight is the record's `attribute` counter as a double (as ingest sets it). */
function weighedBy(kept: readonly { weight: number; item: FlowRecord }[], attribute: WeightAttribute): boolean {
  return kept.every((e) => e.weight === Number(attribute === "bytes" ? e.item.bytes : e.item.packets));
}

/**
 * The file's windows by (windowStart, windowSeconds), in time order, after the checks only an
 * import needs: no k above what Weir keeps, and one weight counter per merged window.
 * Priority sampling allows any positive weight per record, so such a union would still be
 * unbiased, but bytes and packets are not on one scale: the packet-weighted records would
 * almost never win a place, and the merged sample would describe one part only. Throws
 * SampleFileError naming each path.
 */
function groupWindows(windows: readonly SampleWindow[]): Group[] {
  const issues: SampleFileIssue[] = [];
  const byKey = new Map<string, Group>();
  windows.forEach((w, i) => {
    if (w.k > MAX_IMPORT_K) {
      issues.push({ path: `windows[${i}].k`, message: `is ${w.k}; Weir keeps at most ${MAX_IMPORT_K} records per window (the largest sample size)` });
    }
    const key = keyOf(w.windowStart, w.windowSeconds);
    const group = byKey.get(key) ?? { windowStart: w.windowStart, windowSeconds: w.windowSeconds, indexes: [], windows: [] };
    group.indexes.push(i);
    group.windows.push(w);
    byKey.set(key, group);
  });
  for (const group of byKey.values()) {
    const first = group.windows[0];
    group.windows.forEach((w, j) => {
      const kept = w.kept.map((e) => ({ weight: e.weight, item: e.record }));
      if (w.provenance.weightAttribute !== first.provenance.weightAttribute && !weighedBy(kept, first.provenance.weightAttribute)) {
        issues.push({
          path: `windows[${group.indexes[j]}].provenance.weightAttribute`,
          message: `is "${w.provenance.weightAttribute}", but windows[${group.indexes[0]}] of the same window is weighted by "${first.provenance.weightAttribute}": samples weighted by different counters cannot be merged`,
        });
      }
    });
  }
  if (issues.length > 0) throw new SampleFileError(issues);
  return [...byKey.values()].sort((a, b) => a.windowStart - b.windowStart || a.windowSeconds - b.windowSeconds);
}

/** This node's stored reservoirs of the collector for the groups' windows, by window key. */
async function existingWindows(ctx: ImportContext, tenantId: number, collectorId: number, groups: readonly Group[]): Promise<Map<string, StoredWindow>> {
  const found = new Map<string, StoredWindow>();
  const wanted = new Set(groups.map((g) => keyOf(g.windowStart, g.windowSeconds)));
  for (const windowSeconds of new Set(groups.map((g) => g.windowSeconds))) {
    const starts = groups.filter((g) => g.windowSeconds === windowSeconds).map((g) => g.windowStart);
    const stored = await readStoredWindows(ctx.db.$client, tenantId, {
      from: Math.min(...starts),
      to: Math.max(...starts) + 1,
      collectorIds: [collectorId],
      windowSeconds,
    });
    for (const w of stored) {
      const key = keyOf(w.windowStart, w.windowSeconds);
      if (w.node === ctx.node && wanted.has(key)) found.set(key, w);
    }
  }
  return found;
}

function checkExistingWeights(before: StoredWindow, group: Group, collector: string): void {
  const attribute = group.windows[0].provenance.weightAttribute;
  if (weighedBy(before.kept, attribute)) return;
  const other = attribute === "bytes" ? "packets" : "bytes";
  throw new ApiError(
    409,
    "weight_mismatch",
    `The collector ${collector} already holds the window ${new Date(group.windowStart).toISOString()}, sampled by ${other}, but the file's window is weighted by ${attribute}: samples weighted by different counters cannot be merged. Import into another collector.`,
    { details: [{ path: `windows[${group.indexes[0]}].provenance.weightAttribute`, message: `is "${attribute}"; the stored window is weighted by "${other}"` }] },
  );
}

// ---- reading an upload ------------------------------------------------------------------------

/** The 413 answer for a sample file above SAMPLES_MAX_BODY_BYTES. */
export function sampleFileTooLarge(maxBytes: number, when = ""): ApiError {
  return new ApiError(
    413,
    "payload_too_large",
    `The sample file exceeds the limit of ${maxBytes} bytes${when ? ` ${when}` : ""} (SAMPLES_MAX_BODY_BYTES); export a narrower range and import the parts one by one.`,
    { limit: "SAMPLES_MAX_BODY_BYTES", maxBytes },
  );
}

export { discardBody } from "~/http/limited-body.server";

/** The body of an import request, at most `maxBytes` (app/http/limited-body.server.ts). */
export function readLimitedBody(request: Request, maxBytes: number): Promise<Uint8Array<ArrayBuffer>> {
  return readBody(request, maxBytes, () => sampleFileTooLarge(maxBytes));
}

/** Gunzips at most `maxBytes` (a gzip bomb answers 413, not a crash). */
export async function gunzipLimited(body: Uint8Array, maxBytes: number): Promise<Uint8Array> {
  try {
    return await gunzipAsync(body, { maxOutputLength: maxBytes });
  } catch (error) {
    if ((error as { code?: string }).code === "ERR_BUFFER_TOO_LARGE") throw sampleFileTooLarge(maxBytes, "after decompression");
    throw new ApiError(400, "invalid_body", "The body is not valid gzip data.");
  }
}

/** UTF-8 text of a sample file, or a 400 naming the problem. */
export function decodeUtf8(bytes: Uint8Array): string {
  try {
    return new TextDecoder("utf-8", { fatal: true }).decode(bytes);
  } catch {
    throw new ApiError(400, "invalid_sample_file", "The sample file is not valid UTF-8 text.", { details: [{ path: "", message: "is not valid UTF-8" }] });
  }
}

/** The 400 answer for a sample file that failed `parseSampleFile` or an import check. */
export function invalidSampleFile(error: SampleFileError): ApiError {
  const issues = error.issues;
  const details = issues.slice(0, MAX_ISSUES_SHOWN);
  const first = issues[0];
  const where = first ? `${first.path || "(file)"}: ${first.message}` : "it could not be read";
  const more = issues.length > 1 ? ` (and ${issues.length - 1} more problem${issues.length === 2 ? "" : "s"})` : "";
  return new ApiError(400, "invalid_sample_file", `The sample file is invalid; nothing was imported. ${where}${more}.`, {
    details,
    issueCount: issues.length,
    ...(issues.length > details.length ? { moreIssues: issues.length - details.length } : {}),
  });
}

/**
 * The collector to import into, validated as every collector name is; ApiError 400 with
 * `code` otherwise (`invalid_query` for the API's parameter, `invalid_form` for the console's field).
 */
export function parseImportCollector(value: unknown, path: string, code: string): string {
  if (value === null || value === undefined || value === "") {
    throw new ApiError(400, code, `Name the collector to import into (${path}).`, { details: [{ path, message: "is required" }] });
  }
  const parsed = collectorNameSchema.safeParse(value);
  if (!parsed.success) {
    const message = typeof value === "string" ? (parsed.error.issues[0]?.message ?? "is not a collector name") : "must be text";
    throw new ApiError(400, code, `Invalid collector name: ${path} ${message}.`, { details: [{ path, message }] });
  }
  return parsed.data;
}
