import { useId, useRef, useState, type ClipboardEvent, type KeyboardEvent, type ReactNode } from "react";
import { inputClass } from "~/components/ui";
import type { ChipCheck } from "~/slice/chips";

interface ChipInputProps {
  label: string;
  values: string[];
  onChange(values: string[]): void;
  /** Checks typed text on every keystroke; only accepted text becomes a chip, in its normal form. */
  check(text: string): ChipCheck;
  placeholder?: string;
  hint?: ReactNode;
  /** How a chip reads (e.g. "TCP (6)" for "6"). */
  display?(value: string): string;
  max?: number;
}

/**
 * A list of values typed one at a time: Enter or a comma turns valid text into a chip, a
 * pasted comma-separated list becomes several, each chip has its own remove button. The
 * reason text is refused is shown while typing, as the API would word it. Chips that came
 * from a hand-edited link and do not pass are kept, marked, and explained.
 */
export function ChipInput({ label, values, onChange, check, placeholder, hint, display = (v) => v, max = 256 }: ChipInputProps) {
  const id = useId();
  const inputRef = useRef<HTMLInputElement>(null);
  const [text, setText] = useState("");
  const [attempted, setAttempted] = useState(false);

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
    const next = [...values];
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
    if (next.length !== values.length) onChange(next);
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
    onChange(values.filter((v) => v !== value));
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
        onKeyDown={onKeyDown}
        onPaste={onPaste}
        className={`${inputClass} font-mono`}
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
