/**
 * Template Sets and Options Template Sets (IPFIX, RFC 7011 §3.4.1–3.4.2, withdrawals §8.1) and
 * NetFlow v9 Template and Options Template FlowSets (RFC 3954 §5.2, §6.1), parsed into the
 * actions they carry, in order. Nothing here changes state: the decoder applies the actions
 * only once the whole message has proved sound.
 *
 * Pure module: no I/O.
 */
import { compilePlan, type FieldSpec, fieldName, type Plan } from "./fields.ts";

export interface TemplateDefinition {
  id: number;
  options: boolean;
  fields: FieldSpec[];
  /** Names for people (ExporterStats.templates). */
  names: string[];
  plan: Plan;
}

export type TemplateAction =
  | { kind: "define"; template: TemplateDefinition }
  | { kind: "withdraw"; id: number }
  /** RFC 7011 §8.1 Figures U and V: every template (options false) or options template (true) of the domain. */
  | { kind: "withdraw-all"; options: boolean };

function u16(msg: Uint8Array, at: number): number {
  return (msg[at] << 8) | msg[at + 1];
}

function u32(msg: Uint8Array, at: number): number {
  return msg[at] * 16777216 + ((msg[at + 1] << 16) | (msg[at + 2] << 8) | msg[at + 3]);
}

function allZero(msg: Uint8Array, from: number, to: number): boolean {
  for (let i = from; i < to; i++) if (msg[i] !== 0) return false;
  return true;
}

function define(id: number, options: boolean, fields: FieldSpec[], v9ScopeCount: number): TemplateAction | string {
  const plan = compilePlan(fields, options, v9ScopeCount);
  if (typeof plan === "string") return `${options ? "options template" : "template"} ${id}: ${plan}`;
  const names = fields.map((f, i) => fieldName(f, i < v9ScopeCount));
  return { kind: "define", template: { id, options, fields, names, plan } };
}

/**
 * The actions of an IPFIX Template Set (`setId` 2) or Options Template Set (3) whose records
 * occupy `msg[start..end)`, or the reason the set is malformed.
 */
export function parseIpfixTemplateSet(msg: Uint8Array, start: number, end: number, setId: 2 | 3): TemplateAction[] | string {
  const options = setId === 3;
  const actions: TemplateAction[] = [];
  let p = start;
  while (end - p >= 4) {
    const id = u16(msg, p);
    const count = u16(msg, p + 2);
    if (id === 0 && count === 0 && allZero(msg, p, end)) break; // zero padding (RFC 7011 §3.3.1)
    if (count === 0) {
      // RFC 7011 §8.1: a withdrawal is the record header alone, in either kind of set.
      if (id === setId) actions.push({ kind: "withdraw-all", options });
      else if (id < 256) return `withdrawal of template id ${id}: template ids start at 256 (RFC 7011 §3.4.1)`;
      else actions.push({ kind: "withdraw", id });
      p += 4;
      continue;
    }
    if (id < 256) return `template id ${id} is below 256, the first id a template may have (RFC 7011 §3.4.1)`;
    let q = p + 4;
    let scopeCount = 0;
    if (options) {
      if (end - q < 2) return `options template ${id}: its Scope Field Count runs past the set end`;
      scopeCount = u16(msg, q);
      q += 2;
      if (scopeCount === 0) return `options template ${id}: Scope Field Count is 0; it must be at least 1 (RFC 7011 §3.4.2.2)`;
      if (scopeCount > count) return `options template ${id}: Scope Field Count ${scopeCount} exceeds its Field Count ${count}`;
    }
    const fields: FieldSpec[] = [];
    for (let i = 0; i < count; i++) {
      if (end - q < 4) return `template ${id}: field ${i + 1} of ${count} runs past the set end`;
      let type = u16(msg, q);
      const length = u16(msg, q + 2);
      q += 4;
      let enterprise = 0;
      if (type & 0x8000) {
        // Enterprise bit: a 4-octet Private Enterprise Number follows (RFC 7011 §3.2).
        if (end - q < 4) return `template ${id}: the enterprise number of field ${i + 1} runs past the set end`;
        enterprise = u32(msg, q);
        q += 4;
        type &= 0x7fff;
      }
      fields.push({ id: type, enterprise, length });
    }
    const action = define(id, options, fields, 0);
    if (typeof action === "string") return action;
    actions.push(action);
    p = q;
  }
  return actions;
}

/** The actions of a NetFlow v9 Template FlowSet (FlowSet ID 0, RFC 3954 §5.2). */
export function parseV9TemplateFlowSet(msg: Uint8Array, start: number, end: number): TemplateAction[] | string {
  const actions: TemplateAction[] = [];
  let p = start;
  while (end - p >= 4) {
    const id = u16(msg, p);
    const count = u16(msg, p + 2);
    if (id === 0 && count === 0 && allZero(msg, p, end)) break; // padding
    if (id < 256) return `template id ${id} is below 256, the first id a data template may have (RFC 3954 §5.2)`;
    if (count === 0) return `template ${id} has no fields (NetFlow v9 has no template withdrawal)`;
    if (end - p - 4 < 4 * count) return `template ${id}: its ${count} fields run past the FlowSet end`;
    const fields: FieldSpec[] = [];
    for (let i = 0, q = p + 4; i < count; i++, q += 4) fields.push({ id: u16(msg, q), enterprise: 0, length: u16(msg, q + 2) });
    const action = define(id, false, fields, 0);
    if (typeof action === "string") return action;
    actions.push(action);
    p += 4 + 4 * count;
  }
  return actions;
}

/**
 * The actions of a NetFlow v9 Options Template FlowSet (FlowSet ID 1, RFC 3954 §6.1): the scope
 * and option lengths are in octets, four per field specifier.
 */
export function parseV9OptionsFlowSet(msg: Uint8Array, start: number, end: number): TemplateAction[] | string {
  const actions: TemplateAction[] = [];
  let p = start;
  while (end - p >= 6) {
    const id = u16(msg, p);
    const scopeLength = u16(msg, p + 2);
    const optionLength = u16(msg, p + 4);
    if (id === 0 && allZero(msg, p, end)) break; // padding
    if (id < 256) return `options template id ${id} is below 256 (RFC 3954 §6.1)`;
    if (scopeLength % 4 !== 0 || optionLength % 4 !== 0) {
      return `options template ${id}: scope length ${scopeLength} and option length ${optionLength} must be multiples of 4 octets, one field specifier each (RFC 3954 §6.1)`;
    }
    if (scopeLength + optionLength === 0) return `options template ${id} has no fields`;
    if (end - p - 6 < scopeLength + optionLength) return `options template ${id}: its ${(scopeLength + optionLength) / 4} fields run past the FlowSet end`;
    const fields: FieldSpec[] = [];
    for (let q = p + 6; q < p + 6 + scopeLength + optionLength; q += 4) fields.push({ id: u16(msg, q), enterprise: 0, length: u16(msg, q + 2) });
    const action = define(id, true, fields, scopeLength / 4);
    if (typeof action === "string") return action;
    actions.push(action);
    p += 6 + scopeLength + optionLength;
  }
  return actions;
}
