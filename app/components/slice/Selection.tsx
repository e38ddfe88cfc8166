import { useId } from "react";
import type { EstimateAnswer, GroupJson } from "~/query/answer";
import { IntervalValue } from "./figures";

/** The line under a group table that says what `ci95Simultaneous` means. */
export const SIMULTANEOUS_EXPLANATION =
  "Joint 95%: all listed groups' true values lie in their joint intervals together with at least 95% probability " +
  "(Bonferroni over every group ranked); a single row's 95% interval alone does not promise that.";

/** The Slice control for rank=split. */
export function SplitRankField({ checked, onChange }: { checked: boolean; onChange(split: boolean): void }) {
  const id = useId();
  return (
    <div className="flex items-start gap-2">
      <input id={id} type="checkbox" className="mt-1" checked={checked} onChange={(e) => onChange(e.target.checked)} aria-describedby={`${id}-note`} />
      <div className="flex flex-col gap-0.5">
        <label htmlFor={id} className="text-sm font-medium text-river-100">
          Rank on one half, estimate on the other
        </label>
        <p id={`${id}-note`} className="text-xs text-river-300">
          Top groups chosen by their own estimates tend to be overstated; this keeps the numbers shown unbiased, at the cost of a noisier choice.
        </p>
      </div>
    </div>
  );
}

/** The answer's selection note beside the group table: how the groups were chosen and what that does. */
export function SelectionNote({ answer }: { answer: EstimateAnswer }) {
  const selection = answer.selection;
  if (!selection) return null;
  return (
    <div className="mt-3 flex flex-col gap-1 text-xs text-river-300" data-selection={selection.rankedBy}>
      <p className="rounded-md border-l-4 border-river-500 bg-river-900/60 px-3 py-2 text-sm text-river-100">
        <strong className="font-semibold">{selection.rankedBy === "split" ? "Ranked on half A, estimated on half B." : "Ranked by their own estimates."}</strong>{" "}
        {/* The note's last sentence names the API field; the line below says the same in the console's words. */}
        {selection.note.split(" ci95Simultaneous")[0]}
      </p>
      <p>{SIMULTANEOUS_EXPLANATION}</p>
    </div>
  );
}

/** A group's joint (Bonferroni) interval, lighter than its own 95% interval. */
export function SimultaneousCell({ g, metric, rate = false }: { g: Pick<GroupJson, "ci95Simultaneous">; metric: EstimateAnswer["metric"]; rate?: boolean }) {
  return (
    <td className="py-1.5 pr-3 text-right text-river-400">
      {g.ci95Simultaneous ? <IntervalValue low={g.ci95Simultaneous[0]} high={g.ci95Simultaneous[1]} metric={metric} rate={rate} /> : "–"}
    </td>
  );
}
