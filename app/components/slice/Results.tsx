import type { EstimateAnswer, GroupJson } from "~/query/answer";
import type { PercentileJson } from "~/query/rate";
import type { GroupByKind } from "~/query/request";
import { groupField, NO_VALUE_KEY } from "~/query/fields";
import { Button, Panel } from "~/components/ui";
import { protocolLabel } from "~/slice/chips";
import { csvFileName, estimatesCsv } from "~/slice/csv";
import { exactMetric, exactRate, formatPercent, formatUtc, GROUP_LABELS, methodNote } from "~/slice/format";
import { describeQuery, type SliceState } from "~/slice/query-state";
import { exactTotalOf, IntervalValue, MetricValue, ROUGH_EXPLANATION, RoughBadge, Stat } from "./figures";
import { ResolutionNote } from "./Resolution";
import { SelectionNote, SimultaneousCell } from "./Selection";

const METRIC_TITLE = { bytes: "Bytes", packets: "Packets", flows: "Flows" } as const;
const RATE_TITLE = { bytes: "Bit/s", packets: "Packets/s", flows: "Flows/s" } as const;

/**
 * The 95th percentile of the windows' rates with its interval (rate.ts): how traffic
 * engineering reads a range of windows (common practice), with the notes that keep it honest.
 */
export function PercentileFigure({ p95, metric }: { p95: PercentileJson; metric: EstimateAnswer["metric"] }) {
  return (
    <div className="mt-4 rounded-md border border-river-700 px-3 py-2" data-p95>
      <p className="flex flex-wrap items-baseline gap-x-3 gap-y-1">
        <span className="text-sm text-river-300" title={p95.definition}>
          95th percentile of {p95.windows} window{p95.windows === 1 ? "" : "s"}
        </span>
        <MetricValue value={p95.estimate} metric={metric} rate className="text-xl text-river-50" />
        <span className="text-sm text-river-200">
          95% interval <IntervalValue low={p95.ci95[0]} high={p95.ci95[1]} metric={metric} rate />
        </span>
        <span className="text-xs text-river-300">window starting {formatUtc(p95.window)}</span>
      </p>
      <ul className="mt-1 list-inside list-disc text-xs text-river-300">
        {p95.notes.map((n) => (
          <li key={n}>{n}</li>
        ))}
      </ul>
    </div>
  );
}

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
  // As a rate every figure is the total's times one constant (8 bits per byte, over the seconds covered).
  const rate = state.unit === "rate" && answer.rate ? answer.rate : null;
  const shown = rate ?? answer;
  const asRate = rate !== null;
  // A normal interval reads estimate ± half-width (its lower bound may be lifted to what is known
  // for certain); gamma and no-match intervals are not symmetric and read low – high.
  const plusMinus = shown.ci95[1] - shown.estimate;
  const note = methodNote(answer.method);
  return (
    <Panel
      title={
        <span className="flex flex-wrap items-center justify-between gap-2">
          <span>
            {rate ? `${RATE_TITLE[answer.metric]} of the subset, mean over the range` : `${METRIC_TITLE[answer.metric]} in the subset`}{" "}
            {updating ? <span className="ml-2 font-normal tracking-normal text-river-300 normal-case">updating…</span> : null}
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
      {answer.collectorRule && answer.collectorRule.rule !== "named" ? (
        <p className={`mt-1 text-xs ${answer.collectorRule.rule === "overlap-allowed" ? "text-amber-200" : "text-river-300"}`} data-collector-rule>
          {answer.collectorRule.text}
        </p>
      ) : null}
      <p className="mt-3 flex flex-wrap items-baseline gap-x-3 gap-y-1">
        {answer.method === "no-match" ? (
          <span className="text-4xl font-semibold text-river-50">
            0 – <MetricValue value={shown.ci95[1]} metric={answer.metric} rate={asRate} />
          </span>
        ) : (
          <MetricValue value={shown.estimate} metric={answer.metric} rate={asRate} className="text-4xl font-semibold text-river-50" />
        )}
        {/* Capped at the range's exact total, a normal interval may end below the estimate: then it reads low – high, never "± −x". */}
        {answer.method === "normal" && plusMinus >= 0 ? (
          <span className="font-mono text-lg text-river-200" title={`95% interval half-width: ${asRate ? exactRate(plusMinus, answer.metric) : exactMetric(plusMinus, answer.metric)}`}>
            ± <MetricValue value={plusMinus} metric={answer.metric} rate={asRate} />
          </span>
        ) : answer.method === "gamma" || answer.method === "normal" ? (
          <IntervalValue low={shown.ci95[0]} high={shown.ci95[1]} metric={answer.metric} rate={asRate} className="text-lg text-river-200" />
        ) : null}
        <span className="text-sm text-river-300">{note ? `(95%, ${note})` : "(95%)"}</span>
        {answer.rough ? <RoughBadge reason={answer.roughReason} /> : null}
      </p>
      <dl className="mt-4 grid grid-cols-2 gap-x-6 gap-y-3 sm:grid-cols-3 xl:grid-cols-[auto_repeat(4,minmax(0,1fr))]">
        <Stat label="95% interval">
          <IntervalValue low={shown.ci95[0]} high={shown.ci95[1]} metric={answer.metric} rate={asRate} />
        </Stat>
        <Stat label="Standard error">
          <MetricValue value={shown.stdError} metric={answer.metric} rate={asRate} />
        </Stat>
        <Stat label="Relative error" note="standard error ÷ estimate">
          <span className="font-mono">{formatPercent(relative)}</span>
        </Stat>
        <Stat label="Kept records" note="sampled records in the subset">
          <span className="font-mono" title={`${answer.kept.toLocaleString("en-US")} kept records`}>
            {answer.kept.toLocaleString("en-US")}
          </span>
        </Stat>
        <Stat label="Share of all traffic" note={<>of the exact <MetricValue value={total.value} metric={answer.metric} /> in range, whatever the filter</>}>
          <span className="font-mono" title={`estimate ÷ exact total ${exactMetric(total.raw, answer.metric)}`}>
            {formatPercent(share)}
          </span>
        </Stat>
        {rate ? (
          <Stat label="Total over the range" note={`${rate.seconds.toLocaleString("en-US")} s of windows; rate = total${answer.metric === "bytes" ? " × 8" : ""} ÷ seconds`}>
            <MetricValue value={answer.estimate} metric={answer.metric} />
          </Stat>
        ) : null}
      </dl>
      {state.unit === "rate" && answer.p95 ? <PercentileFigure p95={answer.p95} metric={answer.metric} /> : null}
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
  const none = groupField(by).groupBy?.none;
  return none !== undefined && key === NO_VALUE_KEY ? none : key;
}

/** The top groups with the same columns as the headline. */
export function GroupsTable({ answer, by, state }: { answer: EstimateAnswer; by: GroupByKind; state: SliceState }) {
  const total = exactTotalOf(answer);
  const lengths = by === "src" || by === "dst" ? ` (IPv4 /${state.prefixLength.ipv4}, IPv6 /${state.prefixLength.ipv6})` : "";
  const anyRough = answer.groups.some((g) => g.rough);
  const asRate = state.unit === "rate" && answer.groups.every((g) => g.rate !== undefined);
  const perWindow = by === "window";
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
                <th scope="col" className="py-2 pr-3 text-right font-medium">
                  {asRate ? (perWindow ? "Rate (window)" : "Mean rate") : "Estimate"}
                </th>
                <th scope="col" className="py-2 pr-3 text-right font-medium">95% interval</th>
                <th scope="col" className="py-2 pr-3 text-right font-medium text-river-400">Joint 95%</th>
                <th scope="col" className="py-2 pr-3 text-right font-medium">Std error</th>
                <th scope="col" className="py-2 pr-3 text-right font-medium">Rel. error</th>
                <th scope="col" className="py-2 pr-3 text-right font-medium">Kept</th>
                <th scope="col" className="py-2 pr-3 text-right font-medium" title="The group's estimate ÷ the estimate of the whole question (the subset asked)">
                  Share of this question
                </th>
                <th scope="col" className="py-2 text-right font-medium" title="The group's estimate ÷ the exact total of everything in range, whatever the filter">
                  Share of all traffic
                </th>
              </tr>
            </thead>
            <tbody>
              {answer.groups.map((g) => (
                <GroupRow key={g.key} g={g} by={by} metric={answer.metric} exactTotal={total.value} question={answer.estimate} asRate={asRate} />
              ))}
            </tbody>
          </table>
        </div>
      )}
      {asRate ? (
        <p className="mt-3 text-xs text-river-300">
          {perWindow
            ? `Rates per window: each window's estimate${answer.metric === "bytes" ? " × 8" : ""} ÷ its length in seconds; the intervals and standard errors scale by the same factor.`
            : `Mean rates over the ${answer.rate ? answer.rate.seconds.toLocaleString("en-US") : ""} s the range's windows cover: each group's total${answer.metric === "bytes" ? " × 8" : ""} ÷ those seconds; the intervals and standard errors scale by the same factor.`}
        </p>
      ) : null}
      <SelectionNote answer={answer} />
      {anyRough ? <p className="mt-3 text-xs text-river-300">rough: {ROUGH_EXPLANATION}</p> : null}
    </Panel>
  );
}

function GroupRow({
  g,
  by,
  metric,
  exactTotal,
  question,
  asRate,
}: {
  g: GroupJson;
  by: GroupByKind;
  metric: EstimateAnswer["metric"];
  exactTotal: number;
  question: number;
  asRate: boolean;
}) {
  // Older answers (and hand-made ones) may lack the shares: computed the same way here.
  const shareOfQuestion = g.shareOfQuestion !== undefined ? g.shareOfQuestion : question > 0 ? g.estimate / question : null;
  const shareOfAll = g.shareOfAll !== undefined ? g.shareOfAll : exactTotal > 0 ? g.estimate / exactTotal : null;
  const shown = asRate && g.rate ? g.rate : g;
  return (
    <tr className="border-b border-river-800/70 align-baseline last:border-0 hover:bg-river-900">
      <th scope="row" className="py-1.5 pr-3 text-left font-mono font-normal text-river-50">
        <span className="mr-2">{groupLabel(by, g.key)}</span>
        {g.rough ? <RoughBadge reason={g.roughReason} /> : null}
      </th>
      <td className="py-1.5 pr-3 text-right">
        <MetricValue value={shown.estimate} metric={metric} rate={asRate} />
      </td>
      <td className="py-1.5 pr-3 text-right text-river-200">
        <IntervalValue low={shown.ci95[0]} high={shown.ci95[1]} metric={metric} rate={asRate} />
        {methodNote(g.method) ? <span className="ml-1 text-xs text-river-300">({methodNote(g.method)})</span> : null}
      </td>
      <SimultaneousCell g={shown} metric={metric} rate={asRate} />
      <td className="py-1.5 pr-3 text-right text-river-200">
        <MetricValue value={shown.stdError} metric={metric} rate={asRate} />
      </td>
      <td className="py-1.5 pr-3 text-right font-mono text-river-200">{formatPercent(g.estimate > 0 ? g.stdError / g.estimate : Number.NaN)}</td>
      <td className="py-1.5 pr-3 text-right font-mono text-river-200">{g.kept.toLocaleString("en-US")}</td>
      <td className="py-1.5 pr-3 text-right font-mono text-river-200">{formatPercent(shareOfQuestion ?? Number.NaN)}</td>
      <td className="py-1.5 text-right font-mono text-river-200">{formatPercent(shareOfAll ?? Number.NaN)}</td>
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
