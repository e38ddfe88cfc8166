import type { InStatement } from "@libsql/client";
import { createHash } from "node:crypto";
import { promisify } from "node:util";
import { gunzip } from "node:zlib";
import { ApiError } from "~/auth/api-keys.server";
import type { Db } from "~/db/client.server";
import type { FlowRecord } from "~/flow/record";
import { readLimitedBody as readBody } from "~/http/limited-body.server";
import type { ReservoirManager } from "~/ingest/manager.server";
import { counterJson, type Counter } from "~/query/answer";
import { collectorNameSchema, MergedCollectorError } from "~/tenants.server";
import { SampleFileError, type SampleFileIssue, type SampleSet, type SampleWindow, type WeightAttribute } from "./document";
import { mergeWindowStates, putWindowStatements, readStoredWindows, type Executor, type StoredWindow, type WindowState } from "./store.server";

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
  /** The collectors the imported files came from (their windows' `collector`): this collector is a copy of them. */
  copyOf: string[];
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
  /** SHA-256 of the file's bytes (after gzip decoding), hex: the same file is imported once per tenant. */
  digest: string;
}

interface Group {
  windowStart: number;
  windowSeconds: number;
  /** Indexes into the file's windows, for the paths of issues. */
  indexes: number[];
  windows: SampleWindow[];
}

/** SHA-256 of a sample file's bytes as received, after gzip decoding, in hex. */
export function fileDigest(bytes: Uint8Array): string {
  return createHash("sha256").update(bytes).digest("hex");
}

/**
 * Imports a parsed sample file into the collector `collectorName` of the tenant: the file's
 * windows, whatever their `collector` and node, are grouped by (windowStart, windowSeconds),
 * merged with this node's stored reservoir of that collector and window, and written under
 * this node. Exact counters add up exactly. Runs inside `manager.exclusive`, so no ingest
 * batch of this node interleaves, and reads, checks and writes everything plus the ledger
 * entry in one write transaction. Each stored k is the smallest k of its inputs: the
 * tenant's sampleSize is not imposed (k wanted = ∞), so a file keeps the precision it was
 * sampled with.
 *
 * The merge is valid only for disjoint record streams (DLT 2007), so an import refuses what
 * would count records twice: a file whose digest this tenant imported before
 * (409 `duplicate_import`), a window of the same provenance (collector, node and window named
 * in the file) imported before (409 `overlapping_import`), and a target that receives live
 * records (409 `live_collector`). The target becomes, or stays, a **copy** of the collectors
 * the file names (collectors.copy_of): left out of questions that name no collector.
 *
 * Throws MergedCollectorError when the name belongs to a merged collector (answer 409),
 * SampleFileError for windows that cannot be merged (answer 400) and ApiError otherwise;
 * in every case nothing is stored.
 */
export async function importSampleSet(
  ctx: ImportContext,
  tenant: { id: number; sampleSize: number },
  collectorName: string,
  set: SampleSet,
  actor: { id: number | null; label: string },
  digest: string,
): Promise<ImportSummary> {
  collectorNameSchema.parse(collectorName);
  const groups = groupWindows(set.windows);
  const origins = [...new Set(set.windows.map((w) => w.collector))].sort();
  return ctx.manager.exclusive(async () => {
    const tx = await ctx.db.$client.transaction("write");
    try {
      // The target first (a merge's name, a live collector), then what was imported before.
      const collector = await copyCollector(tx, tenant.id, collectorName, origins);
      await refuseRepeat(tx, tenant.id, digest, set);
      const existing = await existingWindows(tx, ctx.node, tenant.id, collector.id, groups);
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
        copyOf: collector.copyOf,
        windows: stored,
        mergedWithExisting,
        kept,
        records: counterJson(records),
        from: new Date(set.from).toISOString(),
        to: new Date(set.to).toISOString(),
        digest,
      };
      const inserted = await tx.execute({
        sql: "INSERT INTO sample_imports (tenant_id, collector_id, digest, windows, kept, records, from_ms, to_ms, created_by, created_at) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?) RETURNING id",
        args: [tenant.id, collector.id, digest, stored, kept, records, set.from, set.to, actor.label, now],
      });
      const importId = Number(inserted.rows[0][0]);
      statements.push({
        sql:
          "INSERT INTO imported_windows (tenant_id, import_id, source_collector, source_node, window_start, window_seconds) " +
          "SELECT ?, ?, json_extract(value, '$[0]'), json_extract(value, '$[1]'), json_extract(value, '$[2]'), json_extract(value, '$[3]') FROM json_each(?)",
        args: [tenant.id, importId, JSON.stringify(provenanceOf(set))],
      });
      statements.push({
        sql: "INSERT INTO audit_log (tenant_id, actor_user_id, actor, action, target, detail, at) VALUES (?, ?, ?, ?, ?, ?, ?)",
        args: [tenant.id, actor.id, actor.label, "samples.import", collector.name, JSON.stringify(summary), now],
      });
      await tx.batch(statements);
      await tx.commit();
      return summary;
    } catch (error) {
      await tx.rollback().catch(() => undefined);
      // Another node committed the same file (or window) between our check and our write.
      if (/UNIQUE constraint failed: (sample_imports|imported_windows)/.test(String((error as Error).message))) {
        throw new ApiError(409, "duplicate_import", "The same file (or a window of it) was imported at the same moment by another request; nothing was imported.");
      }
      throw error;
    } finally {
      tx.close();
    }
  });
}

/** Each window's provenance in the file: [collector, node, windowStart, windowSeconds]. */
function provenanceOf(set: SampleSet): [string, string, number, number][] {
  return set.windows.map((w) => [w.collector, w.provenance.node, w.windowStart, w.windowSeconds]);
}

const iso = (ms: number) => new Date(ms).toISOString();

/**
 * Refuses a file this tenant imported before (by digest), and a file with a window of the
 * same provenance as one imported before: either would count the same records twice.
 */
async function refuseRepeat(tx: Executor, tenantId: number, digest: string, set: SampleSet): Promise<void> {
  const same = await tx.execute({
    sql:
      "SELECT c.name, si.created_by, si.created_at, si.windows FROM sample_imports si JOIN collectors c ON c.id = si.collector_id " +
      "WHERE si.tenant_id = ? AND si.digest = ?",
    args: [tenantId, digest],
  });
  if (same.rows.length > 0) {
    const [row] = same.rows;
    const earlier = { collector: String(row[0]), by: String(row[1]), at: iso(Number(row[2])) };
    throw new ApiError(
      409,
      "duplicate_import",
      `This file was imported already: into ${earlier.collector} at ${earlier.at} by ${earlier.by}. Importing it again would count its records twice; nothing was imported.`,
      { earlier, details: [{ path: "", message: `has SHA-256 ${digest}, the same as the file imported into ${earlier.collector} at ${earlier.at} by ${earlier.by}` }] },
    );
  }
  const overlap = await tx.execute({
    sql:
      "SELECT iw.source_collector, iw.source_node, iw.window_start, iw.window_seconds, c.name, si.created_by, si.created_at " +
      "FROM json_each(?) f JOIN imported_windows iw ON iw.tenant_id = ? AND iw.source_collector = json_extract(f.value, '$[0]') " +
      "AND iw.source_node = json_extract(f.value, '$[1]') AND iw.window_start = json_extract(f.value, '$[2]') AND iw.window_seconds = json_extract(f.value, '$[3]') " +
      "JOIN sample_imports si ON si.id = iw.import_id JOIN collectors c ON c.id = si.collector_id " +
      "ORDER BY iw.window_start LIMIT 1",
    args: [JSON.stringify(provenanceOf(set)), tenantId],
  });
  if (overlap.rows.length > 0) {
    const [row] = overlap.rows;
    const window = { collector: String(row[0]), node: String(row[1]), windowStart: iso(Number(row[2])), windowSeconds: Number(row[3]) };
    const earlier = { collector: String(row[4]), by: String(row[5]), at: iso(Number(row[6])) };
    const index = set.windows.findIndex((w) => w.collector === window.collector && w.provenance.node === window.node && iso(w.windowStart) === window.windowStart && w.windowSeconds === window.windowSeconds);
    const what = `the window ${window.windowStart} (${window.windowSeconds} s) of ${window.collector}, node ${window.node}`;
    throw new ApiError(
      409,
      "overlapping_import",
      `The file holds ${what}, which was imported already: into ${earlier.collector} at ${earlier.at} by ${earlier.by}. Importing it again would count its records twice; nothing was imported. Export a range that leaves out the windows already imported.`,
      { window, earlier, details: [{ path: `windows[${index}]`, message: `${what} was imported into ${earlier.collector} at ${earlier.at} by ${earlier.by}` }] },
    );
  }
}

/**
 * The collector that receives the import, as a copy of `origins`: created when new, its
 * origins widened when it is a copy already. A stream collector with records of its own
 * (sent to it, or imported before copies were recorded) is refused: merging a file into it
 * would make its own records and the copy indistinguishable, and it would count both in
 * every question. A collector with no records yet (say, one made for a key) becomes a copy.
 */
async function copyCollector(tx: Executor, tenantId: number, name: string, origins: string[]): Promise<{ id: number; name: string; copyOf: string[] }> {
  const found = await tx.execute({
    sql: "SELECT id, kind, copy_of, EXISTS (SELECT 1 FROM reservoirs r WHERE r.collector_id = c.id AND r.records > 0) FROM collectors c WHERE c.tenant_id = ? AND c.name = ?",
    args: [tenantId, name],
  });
  if (found.rows.length === 0) {
    const inserted = await tx.execute({
      sql: "INSERT INTO collectors (tenant_id, name, copy_of, created_at) VALUES (?, ?, ?, ?) RETURNING id",
      args: [tenantId, name, JSON.stringify(origins), Date.now()],
    });
    return { id: Number(inserted.rows[0][0]), name, copyOf: origins };
  }
  const [row] = found.rows;
  if (String(row[1]) !== "stream") throw new MergedCollectorError(name);
  const before = row[2] === null ? null : (JSON.parse(String(row[2])) as string[]);
  if (before === null && Number(row[3]) === 1) {
    const message = `${name} holds records of its own (sent to it live); a file merged into it could not be told apart from them and would count in every question. Import into a new collector (it becomes a copy, counted only when named)`;
    throw new ApiError(409, "live_collector", `Cannot import: collector: ${message}.`, { details: [{ path: "collector", message }] });
  }
  const copyOf = [...new Set([...(before ?? []), ...origins])].sort();
  await tx.execute({ sql: "UPDATE collectors SET copy_of = ? WHERE tenant_id = ? AND id = ?", args: [JSON.stringify(copyOf), tenantId, Number(row[0])] });
  return { id: Number(row[0]), name, copyOf };
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
async function existingWindows(tx: Executor, node: string, tenantId: number, collectorId: number, groups: readonly Group[]): Promise<Map<string, StoredWindow>> {
  const found = new Map<string, StoredWindow>();
  const wanted = new Set(groups.map((g) => keyOf(g.windowStart, g.windowSeconds)));
  for (const windowSeconds of new Set(groups.map((g) => g.windowSeconds))) {
    const starts = groups.filter((g) => g.windowSeconds === windowSeconds).map((g) => g.windowStart);
    const stored = await readStoredWindows(tx, tenantId, {
      from: Math.min(...starts),
      to: Math.max(...starts) + 1,
      collectorIds: [collectorId],
      windowSeconds,
    });
    for (const w of stored) {
      const key = keyOf(w.windowStart, w.windowSeconds);
      if (w.node === node && wanted.has(key)) found.set(key, w);
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
