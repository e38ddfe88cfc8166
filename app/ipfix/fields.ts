/**
 * Template plans: when a (Options) Template is defined, its field specifiers are compiled once
 * into a plan — the record length, the offset of every field Weir reads and what to do with
 * it — so decoding a Data Record is a walk over a short integer array (no lookups, no object
 * per record).
 *
 * Field encodings: RFC 7011 §6.1 (types), §6.2 (reduced-size unsigned integers), §7
 * (variable length, Field Length 65535). NetFlow v9 field types 1–127 are the same numbers as
 * the IPFIX elements (RFC 3954 §8; RFC 7012 §4 keeps 1–127 compatible), which is all Weir reads.
 *
 * Pure module: no I/O.
 */
import { elementById, REVERSE_PEN } from "./elements.ts";

/** Field Length 65535 announces a variable-length field (RFC 7011 §7). */
export const VARIABLE_LENGTH = 65535;

/** One field specifier of a template: element id, enterprise (0 for IANA) and length in octets. */
export interface FieldSpec {
  id: number;
  enterprise: number;
  length: number;
}

// ---- operations -------------------------------------------------------------------------
// What the decoder does with a field. Flow records (data templates) use the first group,
// options records the last group; everything else in a template is skipped by its length.
export const OP_SRC4 = 1;
export const OP_DST4 = 2;
export const OP_SRC6 = 3;
export const OP_DST6 = 4;
export const OP_SPORT = 5;
export const OP_DPORT = 6;
export const OP_PROTO = 7;
export const OP_BYTES = 8;
export const OP_PACKETS = 9;
export const OP_INGRESS = 10;
export const OP_EGRESS = 11;
export const OP_SRC_AS = 12;
export const OP_DST_AS = 13;
export const OP_START = 14;
export const OP_END = 15;
export const OP_INIT_TIME = 16;
export const OP_R_BYTES = 17;
export const OP_R_PACKETS = 18;
export const OP_R_START = 19;
export const OP_R_END = 20;
export const OP_R_INGRESS = 21;
export const OP_R_EGRESS = 22;
// options records
export const OP_SAMPLING_INTERVAL = 30; // samplingInterval 34, samplerRandomInterval 50 (and their v9 forms)
export const OP_PACKET_INTERVAL = 31; // samplingPacketInterval 305
export const OP_PACKET_SPACE = 32; // samplingPacketSpace 306
export const OP_SAMPLING_SIZE = 33; // samplingSize 309
export const OP_SAMPLING_POPULATION = 34; // samplingPopulation 310

// How a time field is encoded (the "kind" of an OP_START / OP_END / OP_R_* operation).
export const TIME_SECONDS = 1; // dateTimeSeconds (150/151)
export const TIME_MILLISECONDS = 2; // dateTimeMilliseconds (152/153)
export const TIME_NTP = 3; // dateTimeMicroseconds / dateTimeNanoseconds (154–157): NTP format, RFC 7011 §6.1.9–10
export const TIME_DELTA_MICROSECONDS = 4; // flowStart/EndDeltaMicroseconds (158/159), before the export time
export const TIME_SYS_UP_TIME = 5; // flowStart/EndSysUpTime (22/21), milliseconds since system init

// A start or end time may be sent in several forms; when a template carries more than one,
// the most precise absolute one is used (lower rank first).
const START_FORMS: readonly [number, number][] = [
  [152, TIME_MILLISECONDS], [154, TIME_NTP], [156, TIME_NTP], [150, TIME_SECONDS], [158, TIME_DELTA_MICROSECONDS], [22, TIME_SYS_UP_TIME],
];
const END_FORMS: readonly [number, number][] = [
  [153, TIME_MILLISECONDS], [155, TIME_NTP], [157, TIME_NTP], [151, TIME_SECONDS], [159, TIME_DELTA_MICROSECONDS], [21, TIME_SYS_UP_TIME],
];

/** Octets a time field must have (RFC 7011 §6.1.7–6.1.10; reduced size is not allowed for them, §6.2). */
const TIME_LENGTH: Record<number, number> = {
  [TIME_SECONDS]: 4,
  [TIME_MILLISECONDS]: 8,
  [TIME_NTP]: 8,
  [TIME_DELTA_MICROSECONDS]: 4, // unsigned32: reduced size allowed, checked as an integer
  [TIME_SYS_UP_TIME]: 4, // unsigned32 likewise
};

/** A compiled template. */
export interface Plan {
  /** Record length when every field is fixed-length, else -1. */
  fixedLength: number;
  /** The shortest record this template allows (a variable-length field counts its 1-octet length). */
  minLength: number;
  /** Per field: its length, or -1 for variable length. */
  fieldLengths: Int32Array;
  /** Operations, four integers each: op, field index, offset in the record (fixed templates) or -1, length. */
  ops: Int32Array;
  /** Time encoding per operation (same index as ops / 4); 0 for operations that are no time. */
  timeKinds: Int32Array;
  /** True when the template carries RFC 5103 reverse counters: a record may make two rows. */
  reverse: boolean;
  /** Enterprise-specific fields skipped (reverse elements Weir reads are not among them). */
  enterpriseFields: { enterprise: number; id: number }[];
  /** Scratch for variable-length templates: the offset of each field in the current record. */
  fieldOffsets: Int32Array;
}

interface Wanted {
  op: number;
  kind: number;
  index: number;
}

const UNSIGNED_OCTETS: Record<string, number> = { unsigned8: 1, unsigned16: 2, unsigned32: 4, unsigned64: 8 };

function describe(spec: FieldSpec): string {
  const element = elementById(spec.id, spec.enterprise);
  if (element !== undefined) return `${element.name} (${spec.enterprise === 0 ? spec.id : `${spec.enterprise}/${spec.id}`})`;
  return spec.enterprise === 0 ? `element ${spec.id}` : `enterprise element ${spec.enterprise}/${spec.id}`;
}

/** The name a template summary shows for a field (ExporterStats.templates). */
export function fieldName(spec: FieldSpec, v9Scope: boolean): string {
  if (v9Scope) return `scope${spec.id}`; // RFC 3954 §6.1 scope types: 1 System, 2 Interface, 3 Line Card, 4 Cache, 5 Template
  const element = elementById(spec.id, spec.enterprise);
  if (element !== undefined) return element.name;
  return spec.enterprise === 0 ? `ie${spec.id}` : `e${spec.enterprise}.${spec.id}`;
}

/**
 * Checks that a field Weir reads has a length its abstract data type allows: addresses and
 * date-times exactly their size, unsigned integers at most theirs (reduced-size encoding,
 * RFC 7011 §6.2), never zero or variable. Returns a reason, or null.
 */
function lengthProblem(spec: FieldSpec, exact: number | null, max: number): string | null {
  const what = describe(spec);
  if (spec.length === VARIABLE_LENGTH) return `${what} is sent as variable-length; Weir reads it only as a fixed-length field`;
  if (spec.length === 0) return `${what} has length 0`;
  if (exact !== null && spec.length !== exact) return `${what} has length ${spec.length}; its type takes exactly ${exact} octets (RFC 7011 §6.1, reduced size not allowed, §6.2)`;
  if (spec.length > max) return `${what} has length ${spec.length}; its type takes at most ${max} octets (RFC 7011 §6.2)`;
  return null;
}

/** The operation for an IANA element in a flow (data) template, with its maximum length. */
function flowOp(id: number): [op: number, exact: number | null, max: number] | null {
  switch (id) {
    case 8: return [OP_SRC4, 4, 4];
    case 12: return [OP_DST4, 4, 4];
    case 27: return [OP_SRC6, 16, 16];
    case 28: return [OP_DST6, 16, 16];
    case 7: return [OP_SPORT, null, 2];
    case 11: return [OP_DPORT, null, 2];
    case 4: return [OP_PROTO, null, 1];
    case 10: return [OP_INGRESS, null, 4];
    case 14: return [OP_EGRESS, null, 4];
    case 16: return [OP_SRC_AS, null, 4];
    case 17: return [OP_DST_AS, null, 4];
    case 160: return [OP_INIT_TIME, 8, 8];
    default: return null;
  }
}

function optionsOp(id: number): [op: number, exact: number | null, max: number] | null {
  switch (id) {
    case 34: case 50: return [OP_SAMPLING_INTERVAL, null, 4];
    case 305: return [OP_PACKET_INTERVAL, null, 4];
    case 306: return [OP_PACKET_SPACE, null, 4];
    case 309: return [OP_SAMPLING_SIZE, null, 4];
    case 310: return [OP_SAMPLING_POPULATION, null, 4];
    case 160: return [OP_INIT_TIME, 8, 8];
    default: return null;
  }
}

/**
 * Compiles a template's field specifiers into a plan, or returns why the template cannot be
 * used (a reason in words). `options` marks an Options Template; `v9ScopeCount` is the number
 * of NetFlow v9 scope fields at its start (RFC 3954 §6.1: their types are scope types, not
 * field types, so they are never read).
 *
 * @example compilePlan([{ id: 8, enterprise: 0, length: 4 }, { id: 1, enterprise: 0, length: 4 }], false, 0).fixedLength // 8
 */
export function compilePlan(fields: readonly FieldSpec[], options: boolean, v9ScopeCount: number): Plan | string {
  const n = fields.length;
  const fieldLengths = new Int32Array(n);
  const enterpriseFields: { enterprise: number; id: number }[] = [];
  const wanted: Wanted[] = [];
  const first = new Map<number, number>(); // op → field index, first occurrence wins (RFC 7011 §8: the outer header comes first)
  const startForm = new Map<number, number>(); // element id → field index, for the time forms
  const reverseStartForm = new Map<number, number>();
  let counterBytes = -1, counterBytesTotal = -1, counterPackets = -1, counterPacketsTotal = -1;
  let rBytes = -1, rBytesTotal = -1, rPackets = -1, rPacketsTotal = -1;
  let fixed = 0;
  let min = 0;
  let variable = false;

  for (let i = 0; i < n; i++) {
    const spec = fields[i];
    const isVariable = spec.length === VARIABLE_LENGTH;
    fieldLengths[i] = isVariable ? -1 : spec.length;
    if (isVariable) {
      variable = true;
      min += 1;
    } else {
      fixed += spec.length;
      min += spec.length;
    }
    if (i < v9ScopeCount) continue;
    if (spec.enterprise !== 0 && spec.enterprise !== REVERSE_PEN) {
      enterpriseFields.push({ enterprise: spec.enterprise, id: spec.id });
      continue;
    }
    if (spec.enterprise === REVERSE_PEN) {
      if (options) {
        enterpriseFields.push({ enterprise: spec.enterprise, id: spec.id });
        continue;
      }
      // RFC 5103 §6.1: the reverse direction's counters, times and interfaces.
      let used = true;
      switch (spec.id) {
        case 1: if (rBytes < 0) rBytes = i; break;
        case 85: if (rBytesTotal < 0) rBytesTotal = i; break;
        case 2: if (rPackets < 0) rPackets = i; break;
        case 86: if (rPacketsTotal < 0) rPacketsTotal = i; break;
        case 10: if (!first.has(OP_R_INGRESS)) first.set(OP_R_INGRESS, i); break;
        case 14: if (!first.has(OP_R_EGRESS)) first.set(OP_R_EGRESS, i); break;
        default:
          if ([...START_FORMS, ...END_FORMS].some(([id]) => id === spec.id)) {
            if (!reverseStartForm.has(spec.id)) reverseStartForm.set(spec.id, i);
          } else {
            used = false;
          }
      }
      if (!used) enterpriseFields.push({ enterprise: spec.enterprise, id: spec.id });
      continue;
    }
    if (options) {
      const op = optionsOp(spec.id);
      if (op !== null && !first.has(op[0])) first.set(op[0], i);
      continue;
    }
    switch (spec.id) {
      case 1: if (counterBytes < 0) counterBytes = i; continue;
      case 85: if (counterBytesTotal < 0) counterBytesTotal = i; continue;
      case 2: if (counterPackets < 0) counterPackets = i; continue;
      case 86: if (counterPacketsTotal < 0) counterPacketsTotal = i; continue;
    }
    if ([...START_FORMS, ...END_FORMS].some(([id]) => id === spec.id)) {
      if (!startForm.has(spec.id)) startForm.set(spec.id, i);
      continue;
    }
    const op = flowOp(spec.id);
    if (op !== null && !first.has(op[0])) first.set(op[0], i);
  }

  // Lengths of what will be read, then the operations.
  const limits = new Map<number, [exact: number | null, max: number]>();
  for (const [op, index] of first) {
    const id = fields[index].id;
    const rule = options ? optionsOp(id) : op === OP_R_INGRESS || op === OP_R_EGRESS ? [op, null, 4] as const : flowOp(id);
    limits.set(index, [rule![1], rule![2]]);
    wanted.push({ op, kind: 0, index });
  }
  // Delta counts are preferred; the total counts (85/86) stand in when a template carries only those.
  const counters: [op: number, delta: number, total: number][] = [
    [OP_BYTES, counterBytes, counterBytesTotal], [OP_PACKETS, counterPackets, counterPacketsTotal],
    [OP_R_BYTES, rBytes, rBytesTotal], [OP_R_PACKETS, rPackets, rPacketsTotal],
  ];
  for (const [op, delta, total] of counters) {
    const index = delta >= 0 ? delta : total;
    if (index < 0) continue;
    limits.set(index, [null, 8]);
    wanted.push({ op, kind: 0, index });
  }
  const times: [op: number, forms: readonly [number, number][], found: Map<number, number>][] = [
    [OP_START, START_FORMS, startForm], [OP_END, END_FORMS, startForm],
    [OP_R_START, START_FORMS, reverseStartForm], [OP_R_END, END_FORMS, reverseStartForm],
  ];
  for (const [op, forms, found] of times) {
    for (const [id, kind] of forms) {
      const index = found.get(id);
      if (index === undefined) continue;
      const exact = kind === TIME_DELTA_MICROSECONDS || kind === TIME_SYS_UP_TIME ? null : TIME_LENGTH[kind];
      limits.set(index, [exact, TIME_LENGTH[kind]]);
      wanted.push({ op, kind, index });
      break;
    }
  }
  for (const [index, [exact, max]] of limits) {
    const problem = lengthProblem(fields[index], exact, max);
    if (problem !== null) return problem;
  }
  if (min === 0) return "every field has length 0, so its records would have no octets";

  wanted.sort((a, b) => a.index - b.index);
  // Offsets within a record; with a variable-length field they are found per record instead.
  const offsets = new Int32Array(n);
  for (let i = 0, at = 0; i < n; i++) {
    offsets[i] = variable ? -1 : at;
    at += Math.max(0, fieldLengths[i]);
  }
  const ops = new Int32Array(wanted.length * 4);
  const timeKinds = new Int32Array(wanted.length);
  wanted.forEach((w, k) => {
    ops[4 * k] = w.op;
    ops[4 * k + 1] = w.index;
    ops[4 * k + 2] = offsets[w.index];
    ops[4 * k + 3] = fieldLengths[w.index];
    timeKinds[k] = w.kind;
  });
  return {
    fixedLength: variable ? -1 : fixed,
    minLength: min,
    fieldLengths,
    ops,
    timeKinds,
    reverse: rBytes >= 0 || rBytesTotal >= 0 || rPackets >= 0 || rPacketsTotal >= 0,
    enterpriseFields,
    fieldOffsets: new Int32Array(n),
  };
}
