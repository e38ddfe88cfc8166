import type { MergeAnswer } from "~/merges/answer";
import { count, tau, utcMinute, windowLength } from "./format";

/**
 * A planned or stored merge: its totals, the deduplication notice of a coordinated tenant,
 * and the first windows with their inputs, exact records, k, τ and kept records.
 */
export function MergeSummary({ answer }: { answer: MergeAnswer }) {
  const { totals } = answer;
  const more = totals.windows - answer.windows.length;
  const showDuplicates = answer.coordinated;
  return (
    <div className="flex flex-col gap-4" data-merge-summary={answer.preview ? "preview" : "created"}>
      <dl className="grid grid-cols-2 gap-3 sm:grid-cols-4">
        <Figure label="Windows" value={count(totals.windows)} />
        <Figure label="Kept records" value={count(totals.kept)} />
        <Figure label="Exact records seen" value={count(totals.records)} />
        <Figure label="Sample size wanted" value={count(answer.sampleSize)} />
      </dl>
      {answer.coordinated && totals.duplicatesDropped > 0 ? (
        <p role="status" className="rounded-md border-l-4 border-sand-400 bg-river-950 px-4 py-3 text-sm text-river-100">
          {`Deduplicated: ${count(totals.duplicatesDropped)} flows kept by more than one collector were counted once.`} Copies that no collector kept cannot be
          recognised, so the exact record counts may still include them.
        </p>
      ) : null}
      {totals.windows === 0 ? (
        <p className="text-sm text-river-300">
          No window of {answer.collectors.join(", ")} starts between {utcMinute(answer.from)} and {utcMinute(answer.to)} UTC: there is nothing to merge.
        </p>
      ) : (
        <div className="overflow-x-auto">
          <table className="w-full text-left text-sm">
            <caption className="sr-only">Merged windows, oldest first</caption>
            <thead className="border-b border-river-700 text-xs tracking-wide text-river-300 uppercase">
              <tr>
                <th scope="col" className="py-2 pr-4 font-medium">
                  Window (UTC)
                </th>
                <th scope="col" className="py-2 pr-4 text-right font-medium">
                  Inputs
                </th>
                <th scope="col" className="py-2 pr-4 text-right font-medium">
                  Exact records
                </th>
                {/* normal-case: upper-casing would turn k into K and τ into a Greek capital that reads as T. */}
                <th scope="col" className="py-2 pr-4 text-right font-medium normal-case">
                  k
                </th>
                <th scope="col" className="py-2 pr-4 text-right font-medium normal-case">
                  τ
                </th>
                <th scope="col" className="py-2 pr-4 text-right font-medium">
                  Kept
                </th>
                {showDuplicates ? (
                  <th scope="col" className="py-2 text-right font-medium">
                    Duplicates
                  </th>
                ) : null}
              </tr>
            </thead>
            <tbody className="font-mono text-xs">
              {answer.windows.map((w) => (
                <tr key={`${w.windowStart}/${w.windowSeconds}`} className="border-b border-river-800">
                  <td className="py-1.5 pr-4 whitespace-nowrap">
                    {utcMinute(w.windowStart)} <span className="font-sans text-river-300">· {windowLength(w.windowSeconds)}</span>
                  </td>
                  <td className="py-1.5 pr-4 text-right">{w.inputs}</td>
                  <td className="py-1.5 pr-4 text-right">{count(w.records)}</td>
                  <td className="py-1.5 pr-4 text-right">{count(w.k)}</td>
                  <td className="py-1.5 pr-4 text-right" title={String(w.tau)}>
                    {tau(w.tau)}
                  </td>
                  <td className="py-1.5 pr-4 text-right">{count(w.kept)}</td>
                  {showDuplicates ? <td className="py-1.5 text-right">{count(w.duplicatesDropped)}</td> : null}
                </tr>
              ))}
            </tbody>
          </table>
          {more > 0 ? <p className="mt-2 text-xs text-river-300">{`${count(more)} more windows not shown; the totals above cover all ${count(totals.windows)}.`}</p> : null}
          <p className="mt-2 text-xs text-river-400">
            Inputs: reservoirs merged (collectors × nodes with data in the window). k = min(sample size wanted, every input's k); τ = 0 means every record of the
            window was kept, so its estimates are exact.
          </p>
        </div>
      )}
    </div>
  );
}

function Figure({ label, value }: { label: string; value: string }) {
  return (
    <div className="rounded-md border border-river-800 bg-river-950 px-3 py-2">
      <dt className="text-xs text-river-300">{label}</dt>
      <dd className="font-mono text-lg text-river-50">{value}</dd>
    </div>
  );
}
