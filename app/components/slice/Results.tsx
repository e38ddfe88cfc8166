import type { EstimateAnswer, GroupJson } from "~/query/answer";
import type { GroupByKind } from "~/query/request";
import { Button, Panel } from "~/components/ui";
import { protocolLabel } from "~/slice/chips";
import { csvFileName, estimatesCsv } from "~/slice/csv";
import { exactMetric, formatPercent, formatUtc, GROUP_LABELS, methodNote } from "~/slice/format";
import { describeQuery, type SliceState } from "~/slice/query-state";
import { exactTotalOf, IntervalValue, MetricValue, ROUGH_EXPLANATION, RoughBadge, Stat } from "./figures";
import { ResolutionNote } from "./Resolution";
import { SelectionNote, SimultaneousCell } from "./Selection";

const METRIC_TITLE = { bytes: "Bytes", packets: "Packets", flows: "Flows" } as const;

/** The estimate for the whole subset: the number, its interval and how far to trust it. */
export function Headline({
  answer,
  tenant,
  state,
  updating,
  windowSeconds,
}: {
  answer: EstimateAnswer;
  tenant: string;
  state: SliceState;
  updating: boolean;
  /** The tenant's window length: hourly windows in an answer are roll-ups when it is shorter. */
  windowSeconds: number;
}) {
  const total = exactTotalOf(answer);
  const share = total.value > 0 ? answer.estimate / total.value : Number.NaN;
  const relative = answer.estimate > 0 ? answer.stdError / answer.estimate : Number.NaN;
  // A normal interval reads estimate ± half-width (its lower bound may be lifted to what is known
  // for certain); gamma and no-match intervals are not symmetric and read low – high.
  const plusMinus = answer.ci95[1] - answer.estimate;
  const note = methodNote(answer.method);
  return (
    <Panel
      title={
        <span className="flex flex-wrap items-center justify-between gap-2">
          <span>
            {METRIC_TITLE[answer.metric]} in the subset {updating ? <span className="ml-2 font-normal tracking-normal text-river-300 normal-case">updating…</span> : null}
          </span>
          <ExportCsv answer={answer} tenant={tenant} state={state} />
        </span>
      }
    >
      <p className="text-sm text-river-300">
        Windows starting {formatUtc(answer.from)} – {formatUtc(answer.to)} · {answer.windows} window{answer.windows === 1 ? "" : "s"} with data ·{" "}
        {answer.collectors.length === 0 ? "no collectors" : `collectors ${answer.collectors.join(", ")}`}
      </p>
      <ResolutionNote resolution={answer.resolution} windowSeconds={windowSeconds} />
      <p className="mt-3 flex flex-wrap items-baseline gap-x-3 gap-y-1">
        {answer.method === "no-match" ? (
          <span className="text-4xl font-semibold text-river-50">
            0 – <MetricValue value={answer.ci95[1]} metric={answer.metric} />
          </span>
        ) : (
          <MetricValue value={answer.estimate} metric={answer.metric} className="text-4xl font-semibold text-river-50" />
        )}
        {answer.method === "normal" ? (
          <span className="font-mono text-lg text-river-200" title={`95% interval half-width: ${exactMetric(plusMinus, answer.metric)}`}>
            ± <MetricValue value={plusMinus} metric={answer.metric} />
          </span>
        ) : answer.method === "gamma" ? (
          <IntervalValue low={answer.ci95[0]} high={answer.ci95[1]} metric={answer.metric} className="text-lg text-river-200" />
        ) : null}
        <span className="text-sm text-river-300">{note ? `(95%, ${note})` : "(95%)"}</span>
        {answer.rough ? <RoughBadge reason={answer.roughReason} /> : null}
      </p>
      <dl className="mt-4 grid grid-cols-2 gap-x-6 gap-y-3 sm:grid-cols-3 xl:grid-cols-[auto_repeat(4,minmax(0,1fr))]">
        <Stat label="95% interval">
          <IntervalValue low={answer.ci95[0]} high={answer.ci95[1]} metric={answer.metric} />
        </Stat>
        <Stat label="Standard error">
          <MetricValue value={answer.stdError} metric={answer.metric} />
        </Stat>
        <Stat label="Relative error" note="standard error ÷ estimate">
          <span className="font-mono">{formatPercent(relative)}</span>
        </Stat>
        <Stat label="Kept records" note="sampled records in the subset">
          <span className="font-mono" title={`${answer.kept.toLocaleString("en-US")} kept records`}>
            {answer.kept.toLocaleString("en-US")}
          </span>
        </Stat>
        <Stat label="Share of exact total" note={<>of <MetricValue value={total.value} metric={answer.metric} /> in range (exact)</>}>
          <span className="font-mono" title={`estimate ÷ exact total ${exactMetric(total.raw, answer.metric)}`}>
            {formatPercent(share)}
          </span>
        </Stat>
      </dl>
      {answer.rough ? (
        <p className="mt-4 rounded-md border-l-4 border-sand-400 bg-sand-950/60 px-3 py-2 text-sm text-sand-100">
          <strong className="font-semibold">Rough interval{answer.roughReason ? `: ${answer.roughReason}` : ""}.</strong> {ROUGH_EXPLANATION}
        </p>
      ) : null}
      {answer.method === "no-match" ? (
        <p className="mt-4 text-sm text-river-300">
          No sampled record matched. That is not proof of no traffic: records the sample left out weighed less than τ, and together they may
          add up to the upper bound shown (95%).
        </p>
      ) : null}
      {answer.stdError === 0 && answer.kept > 0 ? (
        <p className="mt-4 text-sm text-river-300">
          Standard error 0: no uncertain sampled record contributes. Each kept record here weighs at least τ, or τ is 0 because its window held at
          most k records; in the second case the number is exact.
        </p>
      ) : null}
    </Panel>
  );
}


function groupLabel(by: GroupByKind, key: string): string {
  if (by === "proto") return protocolLabel(key);
  if (by === "window") return formatUtc(key);
  return key;
}

/** The top groups with the same columns as the headline. */
export function GroupsTable({ answer, by, state }: { answer: EstimateAnswer; by: GroupByKind; state: SliceState }) {
  const total = exactTotalOf(answer);
  const lengths = by === "src" || by === "dst" ? ` (IPv4 /${state.prefixLength.ipv4}, IPv6 /${state.prefixLength.ipv6})` : "";
  const anyRough = answer.groups.some((g) => g.rough);
  return (
    <Panel title={`Top ${state.top} by ${GROUP_LABELS[by].toLowerCase()}${lengths}`}>
      {answer.groups.length === 0 ? (
        <p className="text-sm text-river-300">No group has kept records in this subset.</p>
      ) : (
        <div className="overflow-x-auto">
          <table className="sticky-first w-full min-w-[44rem] text-sm">
            <caption className="sr-only">
              Estimates per {GROUP_LABELS[by].toLowerCase()}, largest first, with 95% intervals
            </caption>
            <thead>
              <tr className="border-b border-river-700 text-left text-xs text-river-300">
                <th scope="col" className="py-2 pr-3 font-medium">{GROUP_LABELS[by]}</th>
                <th scope="col" className="py-2 pr-3 text-right font-medium">Estimate</th>
                <th scope="col" className="py-2 pr-3 text-right font-medium">95% interval</th>
                <th scope="col" className="py-2 pr-3 text-right font-medium text-river-400">Joint 95%</th>
                <th scope="col" className="py-2 pr-3 text-right font-medium">Std error</th>
                <th scope="col" className="py-2 pr-3 text-right font-medium">Rel. error</th>
                <th scope="col" className="py-2 pr-3 text-right font-medium">Kept</th>
                <th scope="col" className="py-2 text-right font-medium">Share</th>
              </tr>
            </thead>
            <tbody>
              {answer.groups.map((g) => (
                <GroupRow key={g.key} g={g} by={by} metric={answer.metric} exactTotal={total.value} />
              ))}
            </tbody>
          </table>
        </div>
      )}
      <SelectionNote answer={answer} />
      {anyRough ? <p className="mt-3 text-xs text-river-300">rough: {ROUGH_EXPLANATION}</p> : null}
    </Panel>
  );
}

function GroupRow({ g, by, metric, exactTotal }: { g: GroupJson; by: GroupByKind; metric: EstimateAnswer["metric"]; exactTotal: number }) {
  return (
    <tr className="border-b border-river-800/70 align-baseline last:border-0 hover:bg-river-900">
      <th scope="row" className="py-1.5 pr-3 text-left font-mono font-normal text-river-50">
        <span className="mr-2">{groupLabel(by, g.key)}</span>
        {g.rough ? <RoughBadge reason={g.roughReason} /> : null}
      </th>
      <td className="py-1.5 pr-3 text-right">
        <MetricValue value={g.estimate} metric={metric} />
      </td>
      <td className="py-1.5 pr-3 text-right text-river-200">
        <IntervalValue low={g.ci95[0]} high={g.ci95[1]} metric={metric} />
        {methodNote(g.method) ? <span className="ml-1 text-xs text-river-300">({methodNote(g.method)})</span> : null}
      </td>
      <SimultaneousCell g={g} metric={metric} />
      <td className="py-1.5 pr-3 text-right text-river-200">
        <MetricValue value={g.stdError} metric={metric} />
      </td>
      <td className="py-1.5 pr-3 text-right font-mono text-river-200">{formatPercent(g.estimate > 0 ? g.stdError / g.estimate : Number.NaN)}</td>
      <td className="py-1.5 pr-3 text-right font-mono text-river-200">{g.kept.toLocaleString("en-US")}</td>
      <td className="py-1.5 text-right font-mono text-river-200">{formatPercent(exactTotal > 0 ? g.estimate / exactTotal : Number.NaN)}</td>
    </tr>
  );
}

/** Downloads the answer as CSV, made in the browser from the answer on screen. */
function ExportCsv({ answer, tenant, state }: { answer: EstimateAnswer; tenant: string; state: SliceState }) {
  function download() {
    const from = Date.parse(answer.from);
    const text = estimatesCsv(answer, tenant, describeQuery(state, from, Date.parse(answer.to), answer.metric));
    const url = URL.createObjectURL(new Blob([text], { type: "text/csv;charset=utf-8" }));
    const link = document.createElement("a");
    link.href = url;
    link.download = csvFileName(tenant, answer.metric, state.groupBy, from);
    document.body.append(link);
    link.click();
    link.remove();
    // Revoked on the next tick: some browsers start the download only after the click handler returns.
    setTimeout(() => URL.revokeObjectURL(url), 0);
  }
  return (
    <Button type="button" tone="quiet" onClick={download} className="py-1 text-xs tracking-normal normal-case" title="Estimates with standard errors and 95% intervals, one line per group">
      Export CSV
    </Button>
  );
}
