/**
 * Which collectors a question counts, and which pairs would count the same records twice.
 *
 * Summing the estimates of several priority samples is unbiased only when they sample
 * disjoint record streams (N. Duffield, C. Lund, M. Thorup, "Priority sampling for estimation
 * of arbitrary subset sums", J. ACM 54(6), 2007: the merge and the sum over reservoirs both
 * assume it). Two kinds of collector hold records that are counted elsewhere too:
 *
 * - a **merge** holds a sample of its inputs' records;
 * - a **copy** (a collector filled by sample-file imports) holds a sample of the records of
 *   the collectors the files came from (their provenance names them).
 *
 * So a question that names no collector counts every stream collector and leaves copies and
 * merges out, and a question that names two collectors holding the same records is refused,
 * unless it asks for that explicitly (`allowOverlap`).
 *
 * Pure module: the estimate API, the merge planner and the Slice form use it alike.
 */

export type CollectorKind = "stream" | "copy" | "merge";

/** A collector as the rule sees it. */
export interface CollectorInfo {
  name: string;
  kind: CollectorKind;
  /** A merge's inputs, a copy's origins (the collectors its imported files came from); empty for a stream. */
  of: string[];
}

/** Two named collectors that hold the same records, and why. */
export interface CollectorOverlap {
  /** `copy_with_origin` when a copy is involved, `overlapping_collectors` for merges alone. */
  code: "copy_with_origin" | "overlapping_collectors";
  collectors: [string, string];
  /** The collector whose records both hold. */
  shared: string;
  message: string;
}

/** A copy or merge left out of a question that named no collector. */
export interface ExcludedCollector {
  collector: string;
  kind: "copy" | "merge";
  of: string[];
  reason: string;
}

/** Which rule chose the collectors of an answer (the `collectorRule` field of an estimate). */
export interface CollectorRuleJson {
  /** `every-stream`: none named; `named`: the named ones; `overlap-allowed`: named ones holding the same records, counted together on request. */
  rule: "every-stream" | "named" | "overlap-allowed";
  /** The rule in one sentence. */
  text: string;
  /** With `every-stream`: the copies and merges with windows in range that were left out. */
  excluded: ExcludedCollector[];
  /** With `overlap-allowed`: the pairs that count the same records twice. */
  overlaps: CollectorOverlap[];
}

/** "copy of pop-north", "merge of pop-north, pop-south", or "" for a stream collector. */
export function kindLabel(c: Pick<CollectorInfo, "kind" | "of">): string {
  if (c.kind === "stream") return "";
  return `${c.kind} of ${c.of.length > 0 ? c.of.join(", ") : "unknown collectors"}`;
}

/**
 * The collectors whose records `name` holds, itself included: a stream holds its own; a merge
 * the records of its inputs; a copy those of its origins. Followed through copies of copies
 * and merges of copies; a name the tenant does not know stands for itself.
 *
 * @example sourcesOf("north-archive", new Map([["north-archive", { name: "north-archive", kind: "copy", of: ["pop-north"] }]]))
 *   // Set { "north-archive", "pop-north" }
 */
export function sourcesOf(name: string, known: ReadonlyMap<string, CollectorInfo>, seen = new Set<string>()): Set<string> {
  if (seen.has(name)) return seen;
  seen.add(name);
  for (const source of known.get(name)?.of ?? []) sourcesOf(source, known, seen);
  return seen;
}

/**
 * Every pair of the chosen collectors that holds the same records (none when fewer than two
 * are chosen): a copy with its origin, a merge with one of its inputs, two copies of one
 * origin, two merges sharing an input.
 *
 * @example overlapsOf(["pop-north", "north-archive"], [{ name: "north-archive", kind: "copy", of: ["pop-north"] }])
 *   // [{ code: "copy_with_origin", collectors: ["pop-north", "north-archive"], shared: "pop-north", message: "north-archive is a copy of pop-north: …" }]
 */
export function overlapsOf(chosen: readonly string[], collectors: readonly CollectorInfo[]): CollectorOverlap[] {
  if (chosen.length < 2) return [];
  const known = new Map(collectors.map((c) => [c.name, c]));
  const sources = chosen.map((name) => sourcesOf(name, known));
  const out: CollectorOverlap[] = [];
  for (let i = 0; i < chosen.length; i++) {
    for (let j = i + 1; j < chosen.length; j++) {
      const shared = [...sources[i]].find((s) => sources[j].has(s));
      if (shared !== undefined) out.push(describeOverlap(chosen[i], chosen[j], shared, known));
    }
  }
  return out;
}

function describeOverlap(a: string, b: string, shared: string, known: ReadonlyMap<string, CollectorInfo>): CollectorOverlap {
  const kindOf = (name: string) => known.get(name)?.kind ?? "stream";
  // A chain through a copy anywhere makes it the copy rule: a merge of plain streams is the merge rule.
  const viaCopy = [a, b].some((name) => [...sourcesOf(name, known)].some((s) => kindOf(s) === "copy"));
  const code = viaCopy ? "copy_with_origin" : "overlapping_collectors";
  const what = (name: string) => (kindOf(name) === "stream" ? name : `${name} (${kindLabel(known.get(name)!)})`);
  let message: string;
  if (shared === a || shared === b) {
    const holder = shared === a ? b : a;
    message = `${what(holder)} holds a sample of ${shared}'s records, so naming both counts them twice`;
  } else {
    message = `${what(a)} and ${what(b)} both hold a sample of ${shared}'s records, so naming both counts them twice`;
  }
  return { code, collectors: [a, b], shared, message };
}

/** The reason a copy or merge is left out of "every collector". */
export function exclusionReason(c: CollectorInfo): string {
  return c.kind === "copy"
    ? `a copy (imported sample files) of ${c.of.join(", ")}: its records may already be counted there; it counts only when named`
    : `a merge of ${c.of.join(", ")}: its records are counted in its inputs; it counts only when named`;
}

/** The rule of an answer, for the `collectorRule` field. */
export function collectorRule(named: readonly string[], excluded: readonly CollectorInfo[], overlaps: readonly CollectorOverlap[]): CollectorRuleJson {
  if (named.length === 0) {
    const left = excluded.filter((c) => c.kind !== "stream");
    return {
      rule: "every-stream",
      text:
        left.length === 0
          ? "No collector named: every stream collector counts (copies and merges count only when named)."
          : `No collector named: every stream collector counts; left out: ${left.map((c) => `${c.name} (${kindLabel(c)})`).join(", ")} — they count only when named.`,
      excluded: left.map((c) => ({ collector: c.name, kind: c.kind as "copy" | "merge", of: c.of, reason: exclusionReason(c) })),
      overlaps: [],
    };
  }
  if (overlaps.length > 0) {
    return {
      rule: "overlap-allowed",
      text: `Named collectors counted together on request (allowOverlap): ${overlaps.map((o) => o.message).join("; ")}.`,
      excluded: [],
      overlaps: [...overlaps],
    };
  }
  return { rule: "named", text: `The named collectors only: ${named.join(", ")}.`, excluded: [], overlaps: [] };
}
