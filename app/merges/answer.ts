/**
 * The merge answer as JSON: what `POST /api/v1/merge` returns and the console's Merge page
 * shows, for a preview and for a stored merge alike.
 *
 * Pure module: no I/O.
 */

/** Windows listed in an API answer; the totals cover all of them. */
export const API_WINDOW_LIMIT = 1000;

export interface MergeWindowJson {
  /** ISO 8601, UTC. */
  windowStart: string;
  windowSeconds: number;
  /** Input reservoirs merged (collectors × nodes with data in the window). */
  inputs: number;
  /** Exact records the inputs saw. */
  records: number;
  k: number;
  tau: number;
  kept: number;
  duplicatesDropped: number;
}

export interface MergeTotalsJson {
  windows: number;
  kept: number;
  records: number;
  duplicatesDropped: number;
}

export interface MergeAnswer {
  name: string;
  collectors: string[];
  from: string;
  to: string;
  sampleSize: number;
  coordinated: boolean;
  /** True when nothing was stored. */
  preview: boolean;
  totals: MergeTotalsJson;
  /** The first windows, oldest first; `truncated` says when there are more. */
  windows: MergeWindowJson[];
  truncated: boolean;
  createdBy: string;
  /** ISO 8601; null for a preview. */
  createdAt: string | null;
  note: string;
}

/** A stored merge with its provenance (times in epoch ms). */
export interface MergeListing {
  name: string;
  inputs: string[];
  from: number;
  to: number;
  sampleSize: number;
  coordinated: boolean;
  windows: number;
  kept: number;
  duplicatesDropped: number;
  /** A person's login, or `key <prefix>` for the API. */
  createdBy: string;
  createdAt: number;
}

/** What the answer is made from: a planned merge (app/merges/plan.server.ts). */
export interface PlannedMerge {
  name: string;
  collectors: string[];
  from: number;
  to: number;
  sampleSize: number;
  coordinated: boolean;
  totals: MergeTotalsJson;
  windows: { windowStart: number; windowSeconds: number; inputs: number; duplicatesDropped: number; state: { k: number; tau: number; records: number; kept: readonly unknown[] } }[];
}

/**
 * The answer for a planned merge, listing at most `windowLimit` windows.
 *
 * @example mergeAnswer(plan, { preview: true, createdBy: "key weir_0a1b2c3d", createdAt: null, windowLimit: 1000 })
 *   // { name: "all-pops", …, totals: { windows: 12, kept: 12288, records: 40312, duplicatesDropped: 0 }, windows: [12 rows], truncated: false, createdAt: null, note: "Preview: nothing was stored. …" }
 */
export function mergeAnswer(
  plan: PlannedMerge,
  options: { preview: boolean; createdBy: string; createdAt: number | null; windowLimit: number },
): MergeAnswer {
  const shown = plan.windows.slice(0, options.windowLimit).map((w) => ({
    windowStart: new Date(w.windowStart).toISOString(),
    windowSeconds: w.windowSeconds,
    inputs: w.inputs,
    records: w.state.records,
    k: w.state.k,
    tau: w.state.tau,
    kept: w.state.kept.length,
    duplicatesDropped: w.duplicatesDropped,
  }));
  const truncated = plan.windows.length > shown.length;
  return {
    name: plan.name,
    collectors: plan.collectors,
    from: new Date(plan.from).toISOString(),
    to: new Date(plan.to).toISOString(),
    sampleSize: plan.sampleSize,
    coordinated: plan.coordinated,
    preview: options.preview,
    totals: plan.totals,
    windows: shown,
    truncated,
    createdBy: options.createdBy,
    createdAt: options.createdAt === null ? null : new Date(options.createdAt).toISOString(),
    note: mergeNote(plan, { preview: options.preview, shown: shown.length }),
  };
}

/** The plain-language caveats of a merge: snapshot, how to query it, duplicates, statistics. */
export function mergeNote(plan: Pick<PlannedMerge, "name" | "coordinated" | "totals">, options: { preview: boolean; shown: number }): string {
  const parts: string[] = [];
  if (options.preview) parts.push("Preview: nothing was stored.");
  parts.push(
    "A merge is a snapshot: windows still open are merged as they stand now, and records that arrive later are not added to it.",
    `Query it by its name (collectors=${plan.name} in /api/v1/estimate, or under Merges in Slice); it is never counted unless named, and never together with its own inputs.`,
  );
  if (plan.totals.windows === 0) parts.push("No window of the chosen collectors starts in this range: there is nothing to merge.");
  if (options.shown < plan.totals.windows) parts.push(`windows lists the first ${options.shown} of ${plan.totals.windows} windows; the totals cover all of them.`);
  if (plan.coordinated && plan.totals.duplicatesDropped > 0) {
    parts.push(
      `Deduplicated: ${plan.totals.duplicatesDropped} flows kept by more than one collector were counted once. Copies that no collector kept cannot be recognised, so the exact record counts may still include them.`,
    );
  }
  parts.push("Estimates from a merge are statistical (95% intervals); for billing or legal disputes, use exact accounting.");
  return parts.join(" ");
}
