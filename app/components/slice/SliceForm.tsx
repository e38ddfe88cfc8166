import { useCallback, useEffect, useId, useRef, useState, type KeyboardEvent, type ReactNode } from "react";
import { Button, inputClass } from "~/components/ui";
import { INPUT_SECTIONS } from "~/query/fields";
import { DEFAULT_TOP, GROUP_BY, MAX_TOP, METRICS, type GroupByKind, type Metric } from "~/query/request";
import { checkProtocolChip, COMMON_PROTOCOLS, protocolLabel } from "~/slice/chips";
import { RANGE_PRESETS, resolveRange, type RangePreset, type SliceRange, type SliceState } from "~/slice/query-state";
import { formatUtcMinute, GROUP_LABELS, parseUtcMinute, UTC_MINUTE_PATTERN } from "~/slice/format";
import { overlapsOf } from "~/query/collector-rule";
import { FieldInputs } from "./FieldInputs";
import { ChipInput, PendingTextContext, useSentValue } from "./ChipInput";
import { SplitRankField } from "./Selection";


const METRIC_LABELS: Record<Metric, string> = { bytes: "Bytes", packets: "Packets", flows: "Flows (records)" };

/** A collector to pick: a stream collector, a merge with the collectors it merged, or a copy with the collectors its imported files came from. */
export interface CollectorChoice {
  name: string;
  kind: "stream" | "merge" | "copy";
  /** A merge's inputs or a copy's origins; empty for a stream collector. */
  inputs: string[];
}

interface SliceFormProps {
  state: SliceState;
  onChange(next: SliceState): void;
  collectors: CollectorChoice[];
  weightAttribute: "bytes" | "packets";
  /**
   * Told, on every change, what the boxes hold but did not apply (text that was refused, one
   * line per box): while the list is not empty the page must not ask the question, since the
   * question on screen is not the one the form would send.
   */
  onHold?(problems: string[]): void;
}

/**
 * The question builder. Every change is applied at once (the page keeps it in the URL); text
 * typed into a box is applied on Enter, when focus leaves the box, or when the form is
 * submitted, so clicking a range or a group-by never asks without it.
 */
export function SliceForm({ state, onChange, collectors, weightAttribute, onHold }: SliceFormProps) {
  // Changes build on the last state sent, not on the prop: the URL catches up after a navigation,
  // and a blur that adds a chip is followed at once by the click that caused it.
  const sent = useSentValue(state);
  const send = (next: SliceState) => {
    sent.value = next;
    onChange(next);
  };
  const set = <K extends keyof SliceState>(key: K, value: SliceState[K]) => send({ ...sent.value, [key]: value });
  type Lists = SliceState["lists"];
  const setList = (field: keyof Lists, values: string[] | ((current: string[]) => string[])) => {
    const current = sent.value;
    send({ ...current, lists: { ...current.lists, [field]: typeof values === "function" ? values(current.lists[field]) : values } });
  };

  const [held, setHeld] = useState<Record<string, string>>({});
  const report = useCallback((label: string, problem: string | null) => {
    setHeld((h) => {
      if ((h[label] ?? null) === problem) return h;
      const next = { ...h };
      if (problem === null) delete next[label];
      else next[label] = problem;
      return next;
    });
  }, []);
  // Told on a change of what is held only; onHold may be a new closure on every render.
  const onHoldRef = useRef(onHold);
  onHoldRef.current = onHold;
  useEffect(() => onHoldRef.current?.(Object.values(held)), [held]);

  const commonNumbers: string[] = COMMON_PROTOCOLS.map((p) => String(p.number));
  const otherProtocols = state.lists.proto.filter((p) => !commonNumbers.includes(p));

  return (
    <PendingTextContext.Provider value={report}>
    <form className="flex flex-col gap-5" onSubmit={(e) => e.preventDefault()} aria-label="Slice question">
      <TimeRange range={state.range} onChange={(range) => set("range", range)} />

      <Section title="Source">
        <FieldInputs section="source" lists={state.lists} onList={setList} />
      </Section>

      <Section title="Destination">
        <FieldInputs section="destination" lists={state.lists} onList={setList} />
      </Section>

      <Section title="Ports and protocols">
        <FieldInputs section="ports" lists={state.lists} onList={setList} />
        <fieldset className="flex flex-col gap-1.5">
          <legend className="mb-1.5 text-sm font-medium text-river-100">Protocols</legend>
          <div className="flex flex-wrap gap-x-4 gap-y-1">
            {COMMON_PROTOCOLS.map((p) => {
              const value = String(p.number);
              const on = state.lists.proto.includes(value);
              return (
                <label key={p.number} className="inline-flex items-center gap-1.5 text-sm text-river-100">
                  <input
                    type="checkbox"
                    checked={on}
                    onChange={() => setList("proto", (proto) => (proto.includes(value) ? proto.filter((x) => x !== value) : [...proto, value]))}
                    className="accent-sand-300"
                  />
                  {p.name} <span className="font-mono text-xs text-river-300">{p.number}</span>
                </label>
              );
            })}
          </div>
          <ChipInput
            label="Other protocol numbers"
            values={otherProtocols}
            onChange={(others) => setList("proto", (proto) => [...proto.filter((p) => commonNumbers.includes(p)), ...others])}
            check={checkProtocolChip}
            display={protocolLabel}
            placeholder="add a number, e.g. 47"
            hint="IANA protocol numbers 0–255. None chosen: every protocol."
          />
        </fieldset>
      </Section>

      <Section title={INPUT_SECTIONS.routing}>
        <FieldInputs section="routing" lists={state.lists} onList={setList} />
      </Section>

      <Collectors known={collectors} chosen={state.lists.collectors} onToggle={(name) => setList("collectors", (c) => (c.includes(name) ? c.filter((x) => x !== name) : [...c, name]))} />

      <Section title="Measure">
        <LabeledSelect
          label="Metric"
          value={state.metric ?? ""}
          onChange={(v) => set("metric", v === "" ? null : (v as Metric))}
          options={[["", `Tenant's weight: ${weightAttribute}`], ...METRICS.map((m) => [m, METRIC_LABELS[m]] as [string, string])]}
        />
        <LabeledSelect
          label="Group by"
          value={state.groupBy ?? ""}
          onChange={(v) => set("groupBy", v === "" ? null : (v as GroupByKind))}
          options={[["", "No grouping"], ...GROUP_BY.map((g) => [g, GROUP_LABELS[g]] as [string, string])]}
        />
        {state.groupBy === "src" || state.groupBy === "dst" ? (
          <div className="grid grid-cols-2 gap-3">
            <NumberField
              label="IPv4 prefix length"
              value={state.prefixLength.ipv4}
              min={0}
              max={32}
              prefix="/"
              onCommit={(n) => set("prefixLength", { ...state.prefixLength, ipv4: n })}
            />
            <NumberField
              label="IPv6 prefix length"
              value={state.prefixLength.ipv6}
              min={0}
              max={128}
              prefix="/"
              onCommit={(n) => set("prefixLength", { ...state.prefixLength, ipv6: n })}
            />
          </div>
        ) : null}
        {state.groupBy !== null ? (
          <NumberField label="Top N groups" value={state.top} min={1} max={MAX_TOP} onCommit={(n) => set("top", n)} hint={`The largest groups by estimate; default ${DEFAULT_TOP}.`} />
        ) : null}
        {state.groupBy !== null ? <SplitRankField checked={state.rank === "split"} onChange={(split) => set("rank", split ? "split" : "estimate")} /> : null}
      </Section>
    </form>
    </PendingTextContext.Provider>
  );
}

function Section({ title, children }: { title: string; children: ReactNode }) {
  return (
    <fieldset className="flex flex-col gap-2.5 border-t border-river-800 pt-3">
      <legend className="pr-2 text-xs font-semibold tracking-wide text-sand-300 uppercase">{title}</legend>
      {children}
    </fieldset>
  );
}

function LabeledSelect({ label, value, onChange, options }: { label: string; value: string; onChange(v: string): void; options: [string, string][] }) {
  const id = useId();
  return (
    <div className="flex flex-col gap-1">
      <label htmlFor={id} className="text-sm font-medium text-river-100">
        {label}
      </label>
      <select id={id} value={value} onChange={(e) => onChange(e.target.value)} className={inputClass}>
        {options.map(([v, text]) => (
          <option key={v} value={v}>
            {text}
          </option>
        ))}
      </select>
    </div>
  );
}

/** A whole number applied on Enter or when focus leaves, so typing "128" does not ask three questions. */
function NumberField({ label, value, min, max, onCommit, hint, prefix }: { label: string; value: number; min: number; max: number; onCommit(n: number): void; hint?: string; prefix?: string }) {
  const id = useId();
  const [text, setText] = useState(String(value));
  useEffect(() => setText(String(value)), [value]);
  const n = Number(text);
  const valid = /^\d+$/.test(text.trim()) && n >= min && n <= max;
  const commit = () => {
    if (valid && n !== value) onCommit(n);
  };
  return (
    <div className="flex flex-col gap-1">
      <label htmlFor={id} className="text-sm font-medium text-river-100">
        {label}
      </label>
      <div className="flex items-center gap-1">
        {prefix ? <span className="font-mono text-river-300" aria-hidden="true">{prefix}</span> : null}
        <input
          id={id}
          type="number"
          inputMode="numeric"
          min={min}
          max={max}
          value={text}
          aria-invalid={!valid}
          aria-describedby={`${id}-note`}
          onChange={(e) => setText(e.target.value)}
          onBlur={commit}
          onKeyDown={(e) => {
            if (e.key === "Enter") {
              e.preventDefault();
              commit();
            }
          }}
          className={`${inputClass} w-full font-mono`}
        />
      </div>
      <p id={`${id}-note`} className={`text-xs ${valid ? "text-river-300" : "text-red-300"}`}>
        {valid ? hint : `A whole number from ${min} to ${max}.`}
      </p>
    </div>
  );
}

/**
 * Stream collectors, copies and merges apart. A merge holds a sample of its inputs' records
 * and a copy one of its origins' (collector-rule.ts), so each counts only when picked and
 * never with what it holds (the estimate API refuses that with 422); with nothing picked,
 * every stream collector counts and copies and merges are left out.
 */
function Collectors({ known, chosen, onToggle: toggle }: { known: CollectorChoice[]; chosen: string[]; onToggle(name: string): void }) {
  const streams = known.filter((c) => c.kind === "stream");
  const merges = known.filter((c) => c.kind === "merge");
  const copies = known.filter((c) => c.kind === "copy");
  // A shared link may name a collector this tenant does not have; keep it visible so it can be removed.
  const unknown = chosen.filter((name) => !known.some((c) => c.name === name));
  const overlap = overlapsOf(chosen, known.map((c) => ({ name: c.name, kind: c.kind, of: c.inputs })))[0]?.message ?? null;
  return (
    <fieldset className="flex flex-col gap-2 border-t border-river-800 pt-4">
      <legend className="pr-2 text-xs font-semibold tracking-wide text-sand-300 uppercase">Collectors</legend>
      {known.length === 0 && unknown.length === 0 ? (
        <p className="text-sm text-river-300">This tenant has no collectors yet.</p>
      ) : (
        <div className="flex max-h-60 flex-col gap-3 overflow-y-auto pr-1">
          {streams.length > 0 || unknown.length > 0 ? (
            <div role="group" aria-label="Stream collectors" className="flex flex-col gap-1">
              {streams.map((c) => (
                <CollectorBox key={c.name} name={c.name} on={chosen.includes(c.name)} onToggle={() => toggle(c.name)} />
              ))}
              {unknown.map((name) => (
                <CollectorBox key={name} name={name} on onToggle={() => toggle(name)} note={<span className="text-xs text-red-300">not a collector of this tenant</span>} />
              ))}
            </div>
          ) : null}
          {copies.length > 0 ? (
            <div role="group" aria-labelledby="slice-copies-label" className="flex flex-col gap-1">
              <p id="slice-copies-label" className="text-xs font-medium text-river-200">
                Copies (imported sample files)
              </p>
              {copies.map((c) => (
                <CollectorBox
                  key={c.name}
                  name={c.name}
                  on={chosen.includes(c.name)}
                  onToggle={() => toggle(c.name)}
                  note={<span className="text-xs text-river-300">copy of {c.inputs.join(", ")}</span>}
                />
              ))}
            </div>
          ) : null}
          {merges.length > 0 ? (
            <div role="group" aria-labelledby="slice-merges-label" className="flex flex-col gap-1">
              <p id="slice-merges-label" className="text-xs font-medium text-river-200">
                Merges
              </p>
              {merges.map((c) => (
                <CollectorBox
                  key={c.name}
                  name={c.name}
                  on={chosen.includes(c.name)}
                  onToggle={() => toggle(c.name)}
                  note={<span className="text-xs text-river-300">of {c.inputs.join(", ")}</span>}
                />
              ))}
            </div>
          ) : null}
        </div>
      )}
      {overlap ? (
        <p role="alert" className="text-xs text-red-300">
          {`${overlap}: pick one of them.`}
        </p>
      ) : null}
      <p className="text-xs text-river-300">
        {chosen.length === 0 ? "None chosen: every stream collector." : `${chosen.length} chosen.`}
        {merges.length > 0
          ? " A merge holds a sample of its inputs' records: it counts only when picked, and not together with its own inputs."
          : null}
        {copies.length > 0 ? " A copy holds imported samples of the collectors it came from: it counts only when picked, and not together with them." : null}
      </p>
    </fieldset>
  );
}

function CollectorBox({ name, on, onToggle, note }: { name: string; on: boolean; onToggle(): void; note?: ReactNode }) {
  return (
    <label className="inline-flex items-center gap-2 text-sm text-river-100">
      <input type="checkbox" checked={on} onChange={onToggle} className="accent-sand-300" />
      <span className="font-mono">{name}</span>
      {note}
    </label>
  );
}

const toInput = formatUtcMinute;

/**
 * Presets, or a custom range typed as 24-hour UTC text ("2024-05-01 14:05"): the browser's
 * own date-time inputs follow its locale (a 12-hour clock in some) and carry no timezone.
 * A range is applied on Apply, on Enter, and when focus leaves a box while both read as times.
 */
function TimeRange({ range, onChange }: { range: SliceRange; onChange(r: SliceRange): void }) {
  const id = useId();
  const custom = !("preset" in range);
  const [editing, setEditing] = useState(custom);
  const [from, setFrom] = useState(custom ? toInput(range.from) : "");
  const [to, setTo] = useState(custom ? toInput(range.to) : "");
  const [error, setError] = useState<string | null>(null);
  // Follows the URL (back button, a pasted link) without clobbering what is being typed.
  const appliedFrom = custom ? range.from : null;
  const appliedTo = custom ? range.to : null;
  useEffect(() => {
    if (appliedFrom !== null && appliedTo !== null) {
      setFrom(toInput(appliedFrom));
      setTo(toInput(appliedTo));
      setEditing(true);
    }
  }, [appliedFrom, appliedTo]);

  function chooseCustom() {
    if (!from || !to) {
      const r = resolveRange("preset" in range ? range : { preset: "24h" }, Date.now());
      setFrom(toInput(r.from));
      setTo(toInput(r.to));
    }
    setEditing(true);
  }

  function apply() {
    const f = parseUtcMinute(from);
    const t = parseUtcMinute(to);
    if (f === null || t === null) return setError("Give both From and To as a UTC date and 24-hour time, e.g. 2024-05-01 14:05.");
    if (t <= f) return setError("To must be after From.");
    if (t - f > 400 * 86_400_000) return setError("One question covers at most 400 days; split a longer range.");
    setError(null);
    if ("from" in range && range.from === f && range.to === t) return;
    onChange({ from: f, to: t });
  }
  const onKeyDown = (e: KeyboardEvent<HTMLInputElement>) => {
    if (e.key === "Enter") {
      e.preventDefault();
      apply();
    }
  };

  const selected = editing ? "custom" : "preset" in range ? range.preset : "custom";
  return (
    <fieldset className="flex flex-col gap-3">
      <legend className="mb-2 text-xs font-semibold tracking-wide text-sand-300 uppercase">Time range (UTC)</legend>
      <div role="radiogroup" aria-label="Time range" className="grid grid-cols-5 gap-1 rounded-md border border-river-700 p-1">
        {(Object.keys(RANGE_PRESETS) as RangePreset[]).map((p) => (
          <RangeChoice key={p} name={id} checked={selected === p} onSelect={() => {
              setEditing(false);
              onChange({ preset: p });
            }} label={p} title={RANGE_PRESETS[p].label} />
        ))}
        <RangeChoice name={id} checked={selected === "custom"} onSelect={chooseCustom} label="Custom" title="From and to, in UTC" />
      </div>
      {selected === "custom" ? (
        <div className="flex flex-col gap-2">
          <div className="grid grid-cols-2 gap-2">
            {(
              [
                ["From", from, setFrom],
                ["To", to, setTo],
              ] as const
            ).map(([label, value, setValue]) => (
              <label key={label} className="flex min-w-0 flex-col gap-1 text-sm text-river-100">
                <span>
                  {label} <span className="text-xs text-river-300">UTC, 24 h</span>
                </span>
                <input
                  type="text"
                  inputMode="numeric"
                  autoComplete="off"
                  spellCheck={false}
                  pattern={UTC_MINUTE_PATTERN}
                  placeholder="YYYY-MM-DD HH:MM"
                  title="A UTC date and 24-hour time, e.g. 2024-05-01 14:05"
                  value={value}
                  aria-invalid={value.trim() !== "" && parseUtcMinute(value) === null}
                  onChange={(e) => setValue(e.target.value)}
                  onBlur={() => {
                    if (parseUtcMinute(from) !== null && parseUtcMinute(to) !== null) apply();
                    else if (value.trim() !== "" && parseUtcMinute(value) === null) setError(`${label}: give a UTC date and 24-hour time, e.g. 2024-05-01 14:05.`);
                  }}
                  onKeyDown={onKeyDown}
                  className={`${inputClass} w-full px-2 font-mono text-xs placeholder:font-sans placeholder:italic`}
                />
              </label>
            ))}
          </div>
          <div className="flex items-center gap-3">
            <Button type="button" tone="quiet" onClick={apply}>
              Apply range
            </Button>
            {error ? (
              <p role="alert" className="text-xs text-red-300">
                {error}
              </p>
            ) : null}
          </div>
        </div>
      ) : null}
      <p className="text-xs text-river-300">Windows whose start lies in the range count. Times are UTC throughout.</p>
    </fieldset>
  );
}

function RangeChoice({ name, checked, onSelect, label, title }: { name: string; checked: boolean; onSelect(): void; label: string; title: string }) {
  return (
    <label
      title={title}
      className={`cursor-pointer rounded px-1 py-1 text-center text-sm has-[:focus-visible]:outline-2 has-[:focus-visible]:outline-sand-300 ${
        checked ? "bg-sand-300 font-medium text-river-950" : "text-river-200 hover:bg-river-800"
      }`}
    >
      <input type="radio" name={name} checked={checked} onChange={onSelect} className="sr-only" />
      <span aria-hidden="true">{label}</span>
      <span className="sr-only">{title}</span>
    </label>
  );
}
