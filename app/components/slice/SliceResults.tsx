import { useEffect, useMemo, useState } from "react";
import useSWR from "swr";
import { EmptyState, LoadingState, Panel } from "~/components/ui";
import type { EstimateAnswer } from "~/query/answer";
import { MAX_TOP } from "~/query/request";
import { fetchJson, type FetchError } from "~/slice/fetch-json";
import { formatUtc } from "~/slice/format";
import { estimateSearch, type SliceState } from "~/slice/query-state";
import { buildSeries } from "~/slice/series";
import { ApiErrorState } from "./figures";
import { GroupsTable, Headline } from "./Results";
import { SeriesChart, SeriesSummary } from "./SeriesChart";

/**
 * The clock a preset range is resolved against: null during server rendering and the first
 * browser render (so both render the same), then the time, refreshed every minute so
 * "last 1 h" keeps meaning the last hour while the page stays open.
 */
function useMinuteClock(): number | null {
  const [now, setNow] = useState<number | null>(null);
  useEffect(() => {
    setNow(Date.now());
    const timer = setInterval(() => setNow(Date.now()), 60_000);
    return () => clearInterval(timer);
  }, []);
  return now;
}

const SWR_OPTIONS = { keepPreviousData: true, revalidateOnFocus: false, shouldRetryOnError: false } as const;

/**
 * Total | Rate: volumes over the range, or per second (bit/s for bytes, pkt/s, flows/s) with
 * the windows' 95th percentile. Held in the page URL (`unit=rate`) like the rest of the question.
 */
export function UnitSwitch({ state, onChange }: { state: SliceState; onChange(next: SliceState): void }) {
  const options = [
    { unit: "total", label: "Total", title: "Volumes over the whole range" },
    { unit: "rate", label: "Rate", title: "Per second: bit/s for bytes, pkt/s, flows/s; with the 95th percentile of the windows' rates" },
  ] as const;
  return (
    <div role="group" aria-label="Show volumes as" className="flex items-center gap-2 text-sm" data-unit={state.unit}>
      <span className="text-river-300">Show as</span>
      <span className="inline-flex overflow-hidden rounded-md border border-river-600">
        {options.map((o) => (
          <button
            key={o.unit}
            type="button"
            aria-pressed={state.unit === o.unit}
            title={o.title}
            onClick={() => onChange({ ...state, unit: o.unit })}
            className={`px-3 py-1 ${state.unit === o.unit ? "bg-sand-300 font-medium text-river-950" : "text-river-100 hover:bg-river-800"}`}
          >
            {o.label}
          </button>
        ))}
      </span>
    </div>
  );
}

/** Asks the estimate API (with the console session) and shows the answer, its series and groups. */
export function SliceResults({
  state,
  tenant,
  windowSeconds,
  onChange,
}: {
  state: SliceState;
  tenant: string;
  windowSeconds: number;
  /** Changes the question (the unit switch); without it no switch is shown. */
  onChange?: (next: SliceState) => void;
}) {
  const results = <SliceAnswer state={state} tenant={tenant} windowSeconds={windowSeconds} />;
  if (!onChange) return results;
  return (
    <div className="flex flex-col gap-3">
      <UnitSwitch state={state} onChange={onChange} />
      {results}
    </div>
  );
}

function SliceAnswer({ state, tenant, windowSeconds }: { state: SliceState; tenant: string; windowSeconds: number }) {
  const now = useMinuteClock();
  const mainKey = now === null ? null : `/api/v1/estimate?${estimateSearch(state, tenant, now)}`;
  const seriesKey = now === null ? null : `/api/v1/estimate?${estimateSearch(state, tenant, now, { groupBy: "window", top: MAX_TOP })}`;
  const main = useSWR<EstimateAnswer, FetchError>(mainKey, fetchJson, SWR_OPTIONS);
  const timeline = useSWR<EstimateAnswer, FetchError>(seriesKey, fetchJson, SWR_OPTIONS);
  // The answer says whether it holds rates: while a new one loads, the previous one stays on screen as it was.
  const asRate = timeline.data?.unit === "rate";
  const series = useMemo(() => (timeline.data ? buildSeries(timeline.data, windowSeconds, timeline.data.unit ?? "total") : null), [timeline.data, windowSeconds]);

  if (main.error) return <ApiErrorState title="The estimate could not be computed" error={main.error} />;
  if (!main.data) return <LoadingState label="Estimating from the kept samples…" />;

  const answer = main.data;
  if (answer.windows === 0) {
    return (
      <EmptyState title="No records in this range">
        <p>
          No window starting between {formatUtc(answer.from)} and {formatUtc(answer.to)} holds records{state.lists.collectors.length > 0 ? " from the chosen collectors" : ""}. Try a
          longer range, or other collectors.
        </p>
      </EmptyState>
    );
  }

  return (
    <div className="flex flex-col gap-6">
      <Headline answer={answer} tenant={tenant} state={state} updating={main.isValidating} windowSeconds={windowSeconds} />
      <Panel title={asRate ? "Rate per window" : "Per window"}>
        {timeline.error ? (
          <ApiErrorState title="The time series could not be computed" error={timeline.error} />
        ) : !series || !timeline.data ? (
          <LoadingState label="Estimating each window…" />
        ) : (
          <figure className="grid gap-5 xl:grid-cols-[minmax(0,1fr)_17rem]">
            <SeriesChart series={series} metric={timeline.data.metric} rate={asRate} />
            <figcaption>
              <SeriesSummary series={series} metric={timeline.data.metric} rate={asRate} />
            </figcaption>
          </figure>
        )}
      </Panel>
      {state.groupBy !== null ? <GroupsTable answer={answer} by={state.groupBy} state={state} /> : null}
    </div>
  );
}
