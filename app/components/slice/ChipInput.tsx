import { createContext, useContext, useEffect, useId, useRef, useState, type ClipboardEvent, type KeyboardEvent, type ReactNode } from "react";
import { inputClass } from "~/components/ui";
import type { ChipCheck } from "~/slice/chips";

interface ChipInputProps {
  label: string;
  values: string[];
  onChange(values: string[]): void;
  /** Checks typed text on every keystroke; only accepted text becomes a chip, in its normal form. */
  check(text: string): ChipCheck;
  /** What to type, in words ("add a CIDR, e.g. …"): shown muted and in italics, so it never reads as a value. */
  placeholder?: string;
  hint?: ReactNode;
  /** How a chip reads (e.g. "TCP (6)" for "6"). */
  display?(value: string): string;
  max?: number;
}

/**
 * Where chip inputs report text they hold but did not apply: told (label, reason) whenever a
 * box, out of focus, still holds text that did not become a chip (it was refused), and
 * (label, null) once it holds none. The Slice form provides it and does not ask the question
 * while any box holds such text.
 */
export const PendingTextContext = createContext<((label: string, problem: string | null) => void) | null>(null);

/**
 * The latest value a component sent up, until the prop it comes back as changes: a parent
 * that keeps its state in the URL answers a change only after a navigation, and a second
 * change made before then (a blur, then a click) must build on the first, not on the old prop.
 */
export function useSentValue<T>(prop: T, key: (value: T) => unknown = (v) => v): { value: T } {
  const ref = useRef({ key: key(prop), value: prop });
  const k = key(prop);
  if (!Object.is(ref.current.key, k)) {
    ref.current.key = k;
    ref.current.value = prop;
  }
  return ref.current;
}

/**
 * A list of values typed one at a time: Enter, a comma, leaving the box (blur) or submitting
 * its form turns valid text into a chip, so nothing typed is silently left out of the
 * question; a pasted comma-separated list becomes several, each chip has its own remove
 * button. The reason text is refused is shown while typing, as the API would word it, and in
 * red once it was applied and refused. Chips that came from a hand-edited link and do not
 * pass are kept, marked, and explained.
 */
export function ChipInput({ label, values: shown, onChange: sendUp, check, placeholder, hint, display = (v) => v, max = 256 }: ChipInputProps) {
  // Handlers read sent.value when they run: a blur may have added a chip since this render.
  const sent = useSentValue(shown, (v) => v.join("\n"));
  const values = sent.value;
  const onChange = (next: string[]) => {
    sent.value = next;
    sendUp(next);
  };
  const report = useContext(PendingTextContext);
  const id = useId();
  const inputRef = useRef<HTMLInputElement>(null);
  const [text, setText] = useState("");
  const [attempted, setAttempted] = useState(false);
  const [focused, setFocused] = useState(false);

  const trimmed = text.trim();
  const checked = trimmed === "" ? null : check(trimmed);
  const full = values.length >= max;

  let message: ReactNode = null;
  let tone = "text-river-300";
  if (full) {
    message = `At most ${max} items; use shorter prefixes or wider port ranges to cover more.`;
  } else if (checked && !checked.ok) {
    message = checked.message;
    // Half-typed text is not yet wrong; say why in a calm tone until Enter is pressed.
    tone = attempted ? "text-red-300" : "text-sand-200";
  } else if (checked && checked.ok) {
    message = values.includes(checked.value) ? `${display(checked.value)} is already in the list.` : `Enter adds ${display(checked.value)}.`;
  }

  /** Adds every valid part of `parts`; returns the parts that were not added. */
  function addParts(parts: string[]): string[] {
    const before = sent.value;
    const next = [...before];
    const left: string[] = [];
    for (const part of parts) {
      const p = part.trim();
      if (p === "") continue;
      const c = check(p);
      if (c.ok && next.length < max) {
        if (!next.includes(c.value)) next.push(c.value);
      } else {
        left.push(p);
      }
    }
    if (next.length !== before.length) onChange(next);
    return left;
  }

  function commit() {
    if (trimmed === "") return;
    const left = addParts([trimmed]);
    if (left.length === 0) {
      setText("");
      setAttempted(false);
    } else {
      setAttempted(true);
    }
  }

  // The form's submit applies the text too; the listener calls the latest commit, not the first render's.
  const commitRef = useRef(commit);
  commitRef.current = commit;
  useEffect(() => {
    const form = inputRef.current?.form;
    if (!form) return;
    const onSubmit = () => commitRef.current();
    form.addEventListener("submit", onSubmit);
    return () => form.removeEventListener("submit", onSubmit);
  }, []);

  // Text left in the box after it lost focus was refused: the form must not ask without it.
  const pending = !focused && trimmed !== "" ? (checked && !checked.ok ? checked.message : full ? message : `${trimmed} was not added.`) : null;
  const pendingProblem = pending === null ? null : `${label}: ${pending}`;
  useEffect(() => {
    report?.(label, pendingProblem);
  }, [report, label, pendingProblem]);
  // A box that goes away (a section closed) must not keep the question held.
  useEffect(() => () => report?.(label, null), [report, label]);

  function onKeyDown(event: KeyboardEvent<HTMLInputElement>) {
    if (event.key === "Enter" || event.key === ",") {
      event.preventDefault();
      commit();
    }
  }

  function onPaste(event: ClipboardEvent<HTMLInputElement>) {
    const pasted = event.clipboardData.getData("text");
    if (!/[,\s]/.test(pasted.trim())) return;
    event.preventDefault();
    const left = addParts(pasted.split(/[,\s]+/));
    setText(left.join(", "));
    setAttempted(left.length > 0);
  }

  function remove(value: string) {
    onChange(sent.value.filter((v) => v !== value));
    inputRef.current?.focus();
  }

  const messageId = `${id}-message`;
  const hintId = `${id}-hint`;
  return (
    <div className="flex flex-col">
      <label htmlFor={id} className="mb-1 text-sm font-medium text-river-100">
        {label}
      </label>
      {values.length > 0 ? (
        <ul aria-label={`${label}: chosen`} className="mb-1.5 flex flex-wrap gap-1.5">
          {values.map((value) => {
            const own = check(value);
            const bad = !own.ok;
            return (
              <li
                key={value}
                className={`inline-flex max-w-full items-center gap-1 rounded-md border py-0.5 pr-0.5 pl-2 font-mono text-xs ${
                  bad ? "border-red-400/70 bg-red-950/40 text-red-100" : "border-river-600 bg-river-800 text-river-50"
                }`}
                title={bad ? own.message : undefined}
              >
                <span className="truncate">{display(value)}</span>
                {bad ? <span className="sr-only">(not valid: {own.message})</span> : null}
                <button
                  type="button"
                  onClick={() => remove(value)}
                  aria-label={`Remove ${display(value)} from ${label}`}
                  className="rounded px-1.5 text-river-300 hover:bg-river-700 hover:text-river-50"
                >
                  <span aria-hidden="true">×</span>
                </button>
              </li>
            );
          })}
        </ul>
      ) : null}
      <input
        ref={inputRef}
        id={id}
        type="text"
        value={text}
        disabled={full}
        placeholder={placeholder}
        autoComplete="off"
        spellCheck={false}
        aria-invalid={attempted && checked !== null && !checked.ok}
        aria-describedby={`${messageId} ${hint ? hintId : ""}`.trim()}
        onChange={(e) => {
          setText(e.target.value);
          setAttempted(false);
        }}
        onFocus={() => setFocused(true)}
        onBlur={() => {
          setFocused(false);
          commit();
        }}
        onKeyDown={onKeyDown}
        onPaste={onPaste}
        className={`${inputClass} font-mono placeholder:font-sans placeholder:italic`}
      />
      {/* Always rendered (empty, it takes no room), so screen readers hear each new reason as it appears. */}
      <p id={messageId} aria-live="polite" className={`text-xs [&:not(:empty)]:mt-1 ${tone}`}>
        {message}
      </p>
      {hint ? (
        <p id={hintId} className="mt-1 text-xs text-river-300">
          {hint}
        </p>
      ) : null}
    </div>
  );
}
