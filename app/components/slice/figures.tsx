import type { ReactNode } from "react";
import { ErrorState } from "~/components/ui";
import type { Counter, EstimateAnswer } from "~/query/answer";
import type { Metric } from "~/query/request";
import type { FetchError } from "~/slice/fetch-json";
import { counterValue, exactMetric, exactRate, formatMetric, formatMetricRange, formatRate, formatRateRange } from "~/slice/format";

/** A figure in short human units, with the exact number in its tooltip; `rate`: a rate of the metric (bit/s, pkt/s, flows/s). */
export function MetricValue({ value, metric, rate = false, className = "" }: { value: number; metric: Metric; rate?: boolean; className?: string }) {
  return (
    <span className={`font-mono ${className}`} title={rate ? exactRate(value, metric) : exactMetric(value, metric)}>
      {rate ? formatRate(value, metric) : formatMetric(value, metric)}
    </span>
  );
}

/** A 95% interval, its unit written once, the exact bounds in its tooltip. */
export function IntervalValue({ low, high, metric, rate = false, className = "" }: { low: number; high: number; metric: Metric; rate?: boolean; className?: string }) {
  const exact = rate ? exactRate : exactMetric;
  return (
    <span className={`font-mono whitespace-nowrap ${className}`} title={`95% interval: ${exact(low, metric)} to ${exact(high, metric)}`}>
      {rate ? formatRateRange(low, high, metric) : formatMetricRange(low, high, metric)}
    </span>
  );
}

/** The exact total of the metric over everything in range, whatever the filter: what a share is a share of. */
export function exactTotalOf(answer: EstimateAnswer): { value: number; raw: Counter } {
  const raw = answer.metric === "flows" ? answer.exact.records : answer.metric === "bytes" ? answer.exact.bytes : answer.exact.packets;
  return { value: counterValue(raw), raw };
}

export const ROUGH_EXPLANATION =
  "The normal approximation would be poor here (fewer than 20 uncertain sampled records, or one record carrying over 5% of the variance, or none matched), so the 95% interval comes from a gamma bound that allows for records the sample left out: it covers, but is wide. A wider time range or filter gives a firmer interval.";

export function RoughBadge({ reason }: { reason?: string | null }) {
  return (
    <span
      title={reason ? `${reason}. ${ROUGH_EXPLANATION}` : ROUGH_EXPLANATION}
      className="inline-flex items-center rounded border border-sand-400/70 px-1.5 py-px text-[11px] font-semibold tracking-wide text-sand-200 uppercase"
    >
      rough
    </span>
  );
}

/** An error from the API, with the field-by-field details it gave. */
export function ApiErrorState({ title, error }: { title: string; error: FetchError | Error }) {
  const details = "details" in error ? error.details : [];
  return (
    <div className="flex flex-col gap-2">
      <ErrorState title={title} message={error.message} />
      {details.length > 0 ? (
        <ul aria-label="Problems with the question" className="ml-1 list-inside list-disc text-sm text-red-200">
          {details.map((d, i) => (
            <li key={i}>
              {d.path ? <span className="font-mono text-red-100">{d.path}</span> : null}
              {d.path ? ": " : null}
              {d.message}
            </li>
          ))}
        </ul>
      ) : null}
    </div>
  );
}

export function Stat({ label, children, note }: { label: string; children: ReactNode; note?: ReactNode }) {
  return (
    <div className="flex flex-col gap-0.5">
      <dt className="text-xs text-river-300">{label}</dt>
      <dd className="text-base text-river-50">{children}</dd>
      {note ? <dd className="text-xs text-river-300">{note}</dd> : null}
    </div>
  );
}
