import { Link, useLoaderData } from "react-router";
import { requireMember } from "~/auth/guards.server";
import { calibrationReport, type CoverageRow } from "~/calibration/report.server";
import { Cautions, EmptyState, PageHeader, Panel } from "~/components/ui";
import type { Route } from "./+types/console.calibration";

export { ErrorBoundary } from "~/components/ErrorPanel";

export const meta: Route.MetaFunction = ({ data }) => [{ title: `Calibration · ${data?.tenant.name ?? "Tenant"} · Weir` }];

/** Calibration (every role): how often the intervals of closed windows' totals covered the exact totals. */
export async function loader({ request, context, params }: Route.LoaderArgs) {
  const { tenant } = await requireMember(request, context, params.tenant);
  const report = await calibrationReport(context.db, tenant, Date.now());
  return { tenant: { slug: tenant.slug, name: tenant.name }, report };
}

const PERIOD_TITLES = { day: "Last day", week: "Last week", month: "Last 30 days" } as const;

function windowLength(seconds: number): string {
  return seconds % 3600 === 0 ? `${seconds / 3600} h` : seconds % 60 === 0 ? `${seconds / 60} min` : `${seconds} s`;
}

const percent = (x: number) => `${(100 * x).toFixed(1)}%`;

function methods(m: Record<string, number>): string {
  return Object.entries(m)
    .sort((a, b) => b[1] - a[1])
    .map(([name, n]) => `${name} ${n}`)
    .join(", ");
}

function CoverageCells({ row }: { row: CoverageRow }) {
  // The only colour: whether 95% lies inside the coverage's interval (the data agree with honest intervals) or not.
  const tone = row.consistent ? "text-emerald-200" : "text-red-200";
  return (
    <>
      <td className="px-3 py-2 text-river-200">{row.metric}</td>
      <td className="px-3 py-2 text-right font-mono tabular-nums">{row.checked}</td>
      <td className="px-3 py-2 text-right font-mono tabular-nums">{row.covered}</td>
      <td className={`px-3 py-2 text-right font-mono tabular-nums ${tone}`} data-consistent={row.consistent}>
        {percent(row.coverage)}
      </td>
      <td className={`px-3 py-2 text-right font-mono tabular-nums ${tone}`}>
        {percent(row.coverage95[0])} – {percent(row.coverage95[1])}
      </td>
      <td className="px-3 py-2 text-river-300">{methods(row.methods)}</td>
    </>
  );
}

export default function Calibration() {
  const { tenant, report } = useLoaderData<typeof loader>();
  const any = report.periods.some((p) => p.rows.length > 0);

  return (
    <>
      <PageHeader
        title="Calibration"
        lead={<>How honest the intervals of {tenant.name} are on its own traffic. Times in UTC; checked every few minutes.</>}
        actions={
          <Link to={`/t/${tenant.slug}/intake`} className="text-sm text-river-200 underline-offset-4 hover:underline">
            Back to Intake
          </Link>
        }
      />
      <div className="flex flex-col gap-6">
        <p className="max-w-3xl text-sm text-river-200">
          Weir counts every record of a window exactly, kept or not, so each closed window tests its own answer: the estimate of the window's total bytes, packets and flows
          from its sample, with its 95% interval, is compared with the exact total. An interval that is honest about its uncertainty misses now and then: about 5 windows
          in 100, so the coverage to expect is about 95%, not 100% (always covering would mean intervals wider than they need to be). Each coverage comes with its own
          95% interval (Wilson's score interval, 1927), since a handful of windows says little; a coverage is shown in red only when 95% lies outside that interval.
          Windows kept whole (no more records than the sample size) are exact and always cover.
        </p>
        {any ? (
          report.periods.map((period) => (
            <Panel key={period.period} title={PERIOD_TITLES[period.period]}>
              {period.rows.length === 0 ? (
                <p className="text-sm text-river-300">No window closed in this period.</p>
              ) : (
                <div className="overflow-x-auto">
                  <table className="w-full text-sm">
                    <thead>
                      <tr className="border-b border-river-700 text-left text-xs text-river-300">
                        <th className="px-3 py-2 font-medium">Collector</th>
                        <th className="px-3 py-2 font-medium">Window</th>
                        <th className="px-3 py-2 font-medium">Metric</th>
                        <th className="px-3 py-2 text-right font-medium">Windows checked</th>
                        <th className="px-3 py-2 text-right font-medium">Covered</th>
                        <th className="px-3 py-2 text-right font-medium">Coverage</th>
                        <th className="px-3 py-2 text-right font-medium">95% interval (Wilson)</th>
                        <th className="px-3 py-2 font-medium">Interval methods</th>
                      </tr>
                    </thead>
                    <tbody>
                      {period.overall.map((row) => (
                        <tr key={`all-${row.metric}`} className="border-b border-river-800 font-medium text-river-50">
                          <td className="px-3 py-2">All collectors</td>
                          <td className="px-3 py-2 text-river-300">any</td>
                          <CoverageCells row={row} />
                        </tr>
                      ))}
                      {period.rows.map((row) => (
                        <tr key={`${row.collector}-${row.windowSeconds}-${row.metric}`} className="border-b border-river-800 text-river-100">
                          <td className="px-3 py-2 font-mono">{row.collector}</td>
                          <td className="px-3 py-2 text-river-300">{windowLength(row.windowSeconds)}</td>
                          <CoverageCells row={row} />
                        </tr>
                      ))}
                    </tbody>
                  </table>
                </div>
              )}
            </Panel>
          ))
        ) : (
          <Panel>
            <EmptyState title="No window checked yet">
              <p>
                A window is checked once it has closed and one more window length has passed, so late records are in. The first figures appear a few minutes after
                records arrive in a window that has since ended.
              </p>
            </EmptyState>
          </Panel>
        )}
        <Cautions compact />
      </div>
    </>
  );
}
