import { useEffect, useMemo, useRef } from "react";
import type uPlot from "uplot";
import "uplot/dist/uPlot.min.css";
import type { Metric } from "~/query/request";
import { axisRate, axisValue, formatMetric, formatMetricRange, formatRate, formatRateRange, formatUtc } from "~/slice/format";
import type { Series } from "~/slice/series";

// Weir's palette (app.css): the estimate in sand, its interval in river, on river-950.
const ESTIMATE = "#ddb668"; // sand-300
const BAND_EDGE = "rgba(134, 176, 172, 0.8)"; // river-300
const BAND_FILL = "rgba(134, 176, 172, 0.32)";
const AXIS = "#b3cfcc"; // river-200
const GRID = "#263d3f"; // river-800
const HEIGHT = 260;
const FONT = "12px 'IBM Plex Sans Variable', sans-serif";

/** Time ticks as 24-hour UTC, with the date under the first tick of each day (uPlot draws "\n" as a second line). */
function utcTicks(_u: uPlot, splits: number[]): string[] {
  return splits.map((s, i) => {
    const iso = new Date(s * 1000).toISOString();
    const day = iso.slice(5, 10);
    const newDay = i === 0 || new Date(splits[i - 1] * 1000).toISOString().slice(5, 10) !== day;
    return newDay ? `${iso.slice(11, 16)}\n${day}` : iso.slice(11, 16);
  });
}

/**
 * The estimate per window as a line with its 95% interval shaded between the low and high
 * series (a uPlot band). uPlot draws on a canvas and needs the DOM, so it is loaded and
 * created in an effect, in the browser only. `rate`: the points are rates (bit/s, pkt/s, flows/s).
 */
export function SeriesChart({ series, metric, rate = false }: { series: Series; metric: Metric; rate?: boolean }) {
  const box = useRef<HTMLDivElement>(null);
  const data = useMemo<uPlot.AlignedData>(
    () => [
      series.points.map((p) => p.start / 1000),
      series.points.map((p) => p.estimate),
      series.points.map((p) => p.low),
      series.points.map((p) => p.high),
    ],
    [series],
  );

  useEffect(() => {
    const el = box.current;
    if (!el) return;
    let plot: uPlot | undefined;
    let cancelled = false;
    const fmt = (_: uPlot, v: number | null) => (v == null ? "—" : rate ? formatRate(v, metric) : formatMetric(v, metric));
    import("uplot").then(({ default: UPlot }) => {
      if (cancelled) return;
      const options: uPlot.Options = {
        width: Math.max(el.clientWidth, 240),
        height: HEIGHT,
        // Weir writes every time in UTC, the chart included.
        tzDate: (ts) => UPlot.tzDate(new Date(ts * 1000), "Etc/UTC"),
        scales: { x: { time: true }, y: { range: (_u, _min, max) => [0, max > 0 ? max * 1.08 : 1] } },
        series: [
          { label: "Window start (UTC)", value: "{YYYY}-{MM}-{DD} {HH}:{mm}" },
          { label: "Estimate", stroke: ESTIMATE, width: 2, value: fmt, points: { show: series.points.length < 60 } },
          { label: "95% low", stroke: BAND_EDGE, width: 1, dash: [4, 4], value: fmt, points: { show: false } },
          { label: "95% high", stroke: BAND_EDGE, width: 1, dash: [4, 4], value: fmt, points: { show: false } },
        ],
        bands: [{ series: [3, 2], fill: BAND_FILL }],
        axes: [
          { stroke: AXIS, grid: { stroke: GRID, width: 1 }, ticks: { stroke: GRID, width: 1 }, font: FONT, values: utcTicks, size: 48 },
          {
            stroke: AXIS,
            grid: { stroke: GRID, width: 1 },
            ticks: { stroke: GRID, width: 1 },
            size: 64,
            font: FONT,
            values: (_u, splits) => splits.map((v) => (rate ? axisRate(v, metric) : axisValue(v, metric))),
            ...(metric === "bytes" ? {} : { label: rate ? `${metric}/s` : metric, labelFont: FONT, labelSize: 18 }),
          },
        ],
        cursor: { points: { size: 7 } },
      };
      plot = new UPlot(options, data, el);
    });
    const resize = new ResizeObserver(() => plot?.setSize({ width: Math.max(el.clientWidth, 240), height: HEIGHT }));
    resize.observe(el);
    return () => {
      cancelled = true;
      resize.disconnect();
      plot?.destroy();
    };
  }, [data, metric, rate, series.points.length]);

  // uPlot's own legend styles are for light pages; quieter type here.
  return (
    <div
      ref={box}
      aria-hidden="true"
      // "!": uPlot's stylesheet is not in a cascade layer, so it beats Tailwind's utilities otherwise.
      className="min-h-[330px] w-full text-river-200 [&_.u-legend]:mt-1 [&_.u-legend]:text-xs! [&_.u-legend_th]:font-normal! [&_.u-legend_th]:text-river-300"
    />
  );
}

/** What the chart shows, in words: for screen readers and for anyone who wants the figures. */
export function SeriesSummary({ series, metric, rate = false }: { series: Series; metric: Metric; rate?: boolean }) {
  const format = rate ? formatRate : formatMetric;
  const formatRange = rate ? formatRateRange : formatMetricRange;
  const known = series.points.filter((p) => p.estimate !== null) as (Series["points"][number] & { estimate: number; low: number; high: number })[];
  if (known.length === 0) return <p className="text-sm text-river-300">No windows in this range.</p>;
  const peak = known.reduce((a, b) => (b.estimate > a.estimate ? b : a));
  const low = known.reduce((a, b) => (b.estimate < a.estimate ? b : a));
  const mean = known.reduce((s, p) => s + p.estimate, 0) / known.length;
  const rough = known.filter((p) => p.rough).length;
  return (
    <div className="flex flex-col gap-2 text-sm text-river-200">
      <p>
        {rate ? "Rate" : "Estimate"} per window over {known.length} window{known.length === 1 ? "" : "s"}, {formatUtc(series.points[0].start)} to{" "}
        {formatUtc(series.points[series.points.length - 1].start)}. The shaded band is the 95% interval of each window.
      </p>
      <dl className="grid grid-cols-[auto_1fr] gap-x-3 gap-y-1">
        <dt className="text-river-300">Highest</dt>
        <dd>
          <span className="font-mono text-river-50">{format(peak.estimate, metric)}</span> (95% interval {formatRange(peak.low, peak.high, metric)}) at{" "}
          {formatUtc(peak.start)}
        </dd>
        <dt className="text-river-300">Lowest</dt>
        <dd>
          <span className="font-mono text-river-50">{format(low.estimate, metric)}</span> at {formatUtc(low.start)}
        </dd>
        <dt className="text-river-300">Mean</dt>
        <dd>
          <span className="font-mono text-river-50">{format(mean, metric)}</span> {rate ? "mean of the windows' rates" : "per window"}
        </dd>
      </dl>
      {rough > 0 ? <p className="text-xs text-river-300">{rough} window{rough === 1 ? " has a rough interval" : "s have rough intervals"}: the normal approximation would be poor there (few uncertain sampled records, or one dominating), so a gamma bound answers.</p> : null}
      {series.truncated ? (
        <p className="text-xs text-sand-200">One answer lists at most 1000 windows: the largest are shown, the rest are gaps. Narrow the range to see every window.</p>
      ) : null}
    </div>
  );
}
