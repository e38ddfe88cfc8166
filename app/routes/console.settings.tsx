import type { ReactNode } from "react";
import { data, Form, useNavigation } from "react-router";
import { requireMember } from "~/auth/guards.server";
import { Button, ErrorState, Field, inputClass, PageHeader, Panel } from "~/components/ui";
import { SETTING_LABELS, settingText, WINDOW_CHOICES, windowLabel, type SettingField } from "~/settings/fields";
import { ADVISOR_SHARES, TRADE_OFF_SHARE } from "~/settings/advisor";
import { sampleSizeAdvice, type SampleSizeAdvice } from "~/settings/advisor.server";
import { maxHourlySampleSize } from "~/sampling/rollup";
import { parseSettingsForm, reservoirShapes, updateTenantSettings } from "~/settings/settings.server";
import type { Route } from "./+types/console.settings";

export { ErrorBoundary } from "~/components/ErrorPanel";

export const meta: Route.MetaFunction = () => [{ title: "Settings · Weir" }];

export async function loader({ request, context, params }: Route.LoaderArgs) {
  const { tenant } = await requireMember(request, context, params.tenant, "admin");
  return {
    tenant: { slug: tenant.slug, name: tenant.name },
    settings: {
      sampleSize: tenant.sampleSize,
      windowSeconds: tenant.windowSeconds,
      weightAttribute: tenant.weightAttribute,
      retentionDays: tenant.retentionDays,
      hourlyRetentionDays: tenant.hourlyRetentionDays,
      hourlySampleSize: tenant.hourlySampleSize,
      // Only whether it is on: the coordination secret never leaves the server.
      coordinated: tenant.coordinated,
    },
    shapes: await reservoirShapes(context.db, tenant.id),
    advice: await sampleSizeAdvice(context.db, tenant, Date.now()),
  };
}

export async function action({ request, context, params }: Route.ActionArgs) {
  const { user, tenant } = await requireMember(request, context, params.tenant, "admin");
  const form = Object.fromEntries(await request.formData());
  const parsed = parseSettingsForm(form);
  if (!parsed.ok) {
    // As posted, so the form shows what was typed (an unticked checkbox posts nothing: "").
    const values = Object.fromEntries(Object.keys(SETTING_LABELS).map((f) => [f, typeof form[f] === "string" ? form[f] : ""])) as Record<SettingField, string>;
    return data({ ok: false as const, fieldErrors: parsed.fieldErrors, values }, { status: 400 });
  }
  const changes = await updateTenantSettings(context.db, tenant, parsed.settings, { id: user.id, label: user.login ?? user.email });
  return { ok: true as const, changes };
}

export default function Settings({ loaderData, actionData }: Route.ComponentProps) {
  const { tenant, settings, shapes, advice } = loaderData;
  const navigation = useNavigation();
  const saving = navigation.state === "submitting";
  const failed = actionData && !actionData.ok ? actionData : undefined;
  const errors: Partial<Record<SettingField, string>> = failed?.fieldErrors ?? {};
  const shown = failed?.values ?? {
    sampleSize: String(settings.sampleSize),
    windowSeconds: String(settings.windowSeconds),
    weightAttribute: settings.weightAttribute,
    retentionDays: String(settings.retentionDays),
    hourlyRetentionDays: String(settings.hourlyRetentionDays),
    hourlySampleSize: settings.hourlySampleSize === null ? "" : String(settings.hourlySampleSize),
    coordinated: settings.coordinated ? "on" : "",
  };
  const error = (f: SettingField) => (errors[f] ? `${SETTING_LABELS[f]} ${errors[f]}.` : undefined);

  return (
    <>
      <PageHeader title="Settings" lead={<>How Weir samples the flow records of {tenant.name}, and how long it keeps the samples.</>} />

      {actionData?.ok ? <SavedNotice changes={actionData.changes} /> : null}
      {failed ? (
        <div className="mb-6">
          <ErrorState
            title="Not saved"
            message={`Fix ${Object.keys(failed.fieldErrors).length === 1 ? "the marked field" : "the marked fields"}; nothing was changed.`}
          />
        </div>
      ) : null}

      <div className="grid grid-cols-[minmax(0,1fr)] gap-6 lg:grid-cols-[minmax(0,1fr)_22rem] lg:items-start">
        <Panel title="Sampling and retention">
          <p className="mb-6 rounded-md border-l-4 border-sand-400 bg-river-950 px-4 py-3 text-sm text-river-100">
            A change applies to windows created from now on. Windows that already exist keep their own sample size k and length, and estimates over old and new
            windows together stay unbiased: each reservoir is answered with its own k and τ. Retention days apply to every stored window at the next roll-up run.
          </p>
          {/* Remounted whenever the stored or the rejected values change, so the fields show them. */}
          <Form key={JSON.stringify(shown)} method="post" noValidate className="flex flex-col gap-7">
            <Setting
              explain={
                <>
                  How many flow records each reservoir keeps, per collector and window (16–65 536). A larger k gives tighter 95% intervals and exact answers for
                  more small windows, but stores more records and makes every question scan more of them.
                </>
              }
            >
              <Field label={SETTING_LABELS.sampleSize} htmlFor="sampleSize" error={error("sampleSize")}>
                <input
                  id="sampleSize"
                  name="sampleSize"
                  type="number"
                  inputMode="numeric"
                  min={16}
                  max={65_536}
                  step={1}
                  defaultValue={shown.sampleSize}
                  aria-invalid={errors.sampleSize ? true : undefined}
                  className={`${inputClass} w-40 font-mono`}
                />
              </Field>
            </Setting>

            <Setting
              explain={
                <>
                  The time bucket one reservoir covers. Shorter windows slice time more finely, so a question about 02:00–02:40 lines up with whole windows, but
                  they make more reservoirs: up to k records per collector for every window.
                </>
              }
            >
              <Field label={SETTING_LABELS.windowSeconds} htmlFor="windowSeconds" error={error("windowSeconds")}>
                <select
                  id="windowSeconds"
                  name="windowSeconds"
                  defaultValue={shown.windowSeconds}
                  aria-invalid={errors.windowSeconds ? true : undefined}
                  className={`${inputClass} w-40`}
                >
                  {WINDOW_CHOICES.map((c) => (
                    <option key={c.seconds} value={c.seconds}>
                      {c.label}
                    </option>
                  ))}
                </select>
              </Field>
            </Setting>

            <Setting
              explain={
                <>
                  What the sample favours: a record's priority is its weight divided by a random draw, so flows heavy in this measure are almost always kept.
                  Bytes suits volume questions, packets suits packet-rate ones (many small packets). Every metric can still be estimated; the chosen one most
                  precisely. A new weight applies to records received from now on, also in the window that is open; each kept record remembers the weight it was
                  sampled with.
                </>
              }
            >
              <fieldset className="flex flex-col gap-1" aria-describedby={errors.weightAttribute ? "weightAttribute-error" : undefined}>
                <legend className="mb-1 text-sm font-medium text-river-100">{SETTING_LABELS.weightAttribute}</legend>
                <div className="flex gap-5">
                  {(["bytes", "packets"] as const).map((w) => (
                    <label key={w} className="flex items-center gap-2 text-sm text-river-100">
                      <input type="radio" name="weightAttribute" value={w} defaultChecked={shown.weightAttribute === w} className="accent-sand-300" />
                      {w}
                    </label>
                  ))}
                </div>
                {errors.weightAttribute ? (
                  <p id="weightAttribute-error" role="alert" className="text-sm text-red-300">
                    {error("weightAttribute")}
                  </p>
                ) : null}
              </fieldset>
            </Setting>

            <Setting
              explain={
                <>
                  Fine windows (shorter than an hour) become hourly ones after N days (the first field): the same unbiased estimates, at a coarser time
                  resolution and with wider intervals for every subset (how much wider: the hourly sample size and the trade-off below). Every window is deleted M days (the second field, at least N) after it ended. With M = N
                  fine windows are deleted at N days, without a roll-up. Both 1–3650 days.
                </>
              }
              aside={
                <p className="self-start rounded-md border-l-4 border-sand-400 bg-river-950 px-4 py-3 text-sm text-river-200">
                  Flow records carry IP addresses and can be personal data. Keep them only as long as needed: set these days to follow your data-protection policy
                  and local law.
                </p>
              }
            >
              <div className="flex flex-wrap gap-6">
                <DaysField field="retentionDays" shown={shown.retentionDays} error={error("retentionDays")} />
                <DaysField field="hourlyRetentionDays" shown={shown.hourlyRetentionDays} error={error("hourlyRetentionDays")} />
              </div>
            </Setting>

            <Setting
              explain={
                <>
                  K, the records each hourly window keeps when fine windows are rolled up (blank: the sample size k). Any K from 16 up to the sum of the fine
                  windows&apos; k ({maxHourlySampleSize(settings.sampleSize, settings.windowSeconds)} = k × windows per hour) gives unbiased estimates: at most k it is
                  the merge of Duffield, Lund and Thorup (J. ACM 2007), exactly the sample one reservoir over the hour would keep; above k the roll-up keeps every record
                  whose priority beats every fine window&apos;s τ (fewer than K when their τ differ), still unbiased. Every interval after the roll-up is wider, not
                  only small subsets&apos;: see the trade-off below.
                </>
              }
            >
              <Field label={SETTING_LABELS.hourlySampleSize} htmlFor="hourlySampleSize" error={error("hourlySampleSize")}>
                <input
                  id="hourlySampleSize"
                  name="hourlySampleSize"
                  type="number"
                  inputMode="numeric"
                  min={16}
                  max={maxHourlySampleSize(settings.sampleSize, settings.windowSeconds)}
                  step={1}
                  placeholder={String(settings.sampleSize)}
                  defaultValue={shown.hourlySampleSize}
                  aria-invalid={errors.hourlySampleSize ? true : undefined}
                  className={`${inputClass} w-40 font-mono`}
                />
              </Field>
            </Setting>

            <Setting
              explain={
                <>
                  The same flow exported by two collectors gets the same priority (its random draw comes from a keyed hash of its addresses, ports, protocol and
                  start time), so a merge of those collectors counts it once. It applies to records received from then on; windows sampled before are merged as
                  independent samples. The tenant's key is made when first turned on and never changes.
                </>
              }
            >
              <div className="flex flex-col gap-1">
                <label className="flex items-center gap-2 text-sm font-medium text-river-100">
                  <input
                    id="coordinated"
                    name="coordinated"
                    type="checkbox"
                    defaultChecked={shown.coordinated === "on"}
                    aria-invalid={errors.coordinated ? true : undefined}
                    aria-describedby={errors.coordinated ? "coordinated-error" : undefined}
                    className="accent-sand-300"
                  />
                  {SETTING_LABELS.coordinated}
                </label>
                {errors.coordinated ? (
                  <p id="coordinated-error" role="alert" className="text-sm text-red-300">
                    {error("coordinated")}
                  </p>
                ) : null}
              </div>
            </Setting>

            <div>
              <Button type="submit" disabled={saving}>
                {saving ? "Saving…" : "Save settings"}
              </Button>
            </div>
          </Form>
        </Panel>

        <Panel title="Stored reservoirs">
          <ReservoirShapes shapes={shapes} current={settings} />
        </Panel>
      </div>

      <div className="mt-6 grid gap-6">
        <Panel title="Sample-size advisor">
          <SampleSizeAdvisor advice={advice} settings={settings} />
        </Panel>
      </div>
    </>
  );
}

/** A number of days, 1–3650. */
function DaysField({ field, shown, error }: { field: "retentionDays" | "hourlyRetentionDays"; shown: string; error: string | undefined }) {
  return (
    <Field label={SETTING_LABELS[field]} htmlFor={field} error={error}>
      <span className="flex items-center gap-2">
        <input
          id={field}
          name={field}
          type="number"
          inputMode="numeric"
          min={1}
          max={3650}
          step={1}
          defaultValue={shown}
          aria-invalid={error ? true : undefined}
          className={`${inputClass} w-40 font-mono`}
        />
        <span className="text-sm text-river-300">days</span>
      </span>
    </Field>
  );
}

/** One setting: its field, the sentence on what it does and costs, and an optional note beside it. */
function Setting({ children, explain, aside }: { children: ReactNode; explain: ReactNode; aside?: ReactNode }) {
  return (
    <div className={`grid gap-4 border-b border-river-800 pb-6 ${aside ? "md:grid-cols-[minmax(0,1fr)_minmax(0,18rem)]" : ""}`}>
      <div className="flex flex-col gap-2">
        {children}
        <p className="max-w-2xl text-sm text-river-300">{explain}</p>
      </div>
      {aside}
    </div>
  );
}

function SavedNotice({ changes }: { changes: { field: SettingField; old: number | string | boolean | null; new: number | string | boolean | null }[] }) {
  return (
    <div role="status" className="mb-6 rounded-md border-l-4 border-sand-300 bg-river-900 px-4 py-3 text-sm text-river-100">
      {changes.length === 0 ? (
        <p>Saved: nothing had changed.</p>
      ) : (
        <>
          <p className="font-medium text-sand-200">
            {[
              "Saved.",
              changes.some((c) => c.field === "sampleSize" || c.field === "windowSeconds") ? "Windows created from now on use the new k and length." : "",
              changes.some((c) => c.field === "retentionDays" || c.field === "hourlyRetentionDays") ? "The next roll-up run applies the new retention." : "",
              changes.some((c) => c.field === "hourlySampleSize") ? "The next roll-up run writes hourly windows of the new size." : "",
              changes.some((c) => c.field === "coordinated") ? "Records received from now on are sampled with the new priorities." : "",
            ]
              .filter(Boolean)
              .join(" ")}
          </p>
          <ul className="mt-1 list-inside list-disc text-river-200">
            {changes.map((c) => (
              <li key={c.field}>{`${SETTING_LABELS[c.field]}: ${settingText(c.field, c.old)} → ${settingText(c.field, c.new)}`}</li>
            ))}
          </ul>
        </>
      )}
    </div>
  );
}

function ReservoirShapes({
  shapes,
  current,
}: {
  shapes: { k: number; windowSeconds: number; reservoirs: number; firstWindowStart: number; lastWindowStart: number }[];
  current: { sampleSize: number; windowSeconds: number };
}) {
  if (shapes.length === 0) {
    return (
      <p className="text-sm text-river-300">
        No reservoirs yet. The first batch a collector sends creates one for each window it touches, with the settings of that moment.
      </p>
    );
  }
  return (
    <>
      <p className="mb-3 text-sm text-river-300">Each reservoir keeps the k and window length it was created with.</p>
      <ul className="divide-y divide-river-800 border-y border-river-800">
        {shapes.map((s) => (
          <li key={`${s.k}:${s.windowSeconds}`} className="py-2.5 text-sm">
            <p className="flex items-baseline justify-between gap-3">
              <span className="text-river-50">
                <span className="font-mono">{`k = ${s.k}`}</span>
                <span className="text-river-300">{` · ${windowLabel(s.windowSeconds)}`}</span>
              </span>
              <span className="font-mono text-river-100">{`${s.reservoirs} reservoir${s.reservoirs === 1 ? "" : "s"}`}</span>
            </p>
            <p className="mt-0.5 font-mono text-xs whitespace-nowrap text-river-400">{`${utcDay(s.firstWindowStart)} – ${utcDay(s.lastWindowStart)}`}</p>
            {s.k === current.sampleSize && s.windowSeconds === current.windowSeconds ? <p className="mt-0.5 text-xs text-sand-300">current settings</p> : null}
          </li>
        ))}
      </ul>
      <p className="mt-2 text-xs text-river-400">First and last window start, UTC.</p>
    </>
  );
}

/** Epoch ms as `YYYY-MM-DD HH:MM`, UTC, so server and browser render the same text. */
function utcDay(ms: number): string {
  return new Date(ms).toISOString().slice(0, 16).replace("T", " ");
}

const percent = (x: number) => (Number.isFinite(x) ? `±${(100 * 1.959963984540054 * x).toPrecision(2)}%` : "—");

/**
 * The advisor (app/settings/advisor.ts): 95% half-widths (1.96 × relative standard error) for a
 * subset holding a share of the weight, from the tenant's own last 24 h of fine windows, and the
 * roll-up's storage against interval width.
 */
function SampleSizeAdvisor({
  advice,
  settings,
}: {
  advice: SampleSizeAdvice;
  settings: { sampleSize: number; retentionDays: number; hourlyRetentionDays: number; hourlySampleSize: number | null; weightAttribute: string };
}) {
  if (advice.windows === 0) {
    return <p className="text-sm text-river-300">No fine windows in the last 24 hours yet: the advisor reads the tenant&apos;s own recent samples.</p>;
  }
  const fineDays = settings.retentionDays;
  const hourlyDays = Math.max(0, settings.hourlyRetentionDays - settings.retentionDays);
  const K = settings.hourlySampleSize ?? settings.sampleSize;
  return (
    <div className="flex flex-col gap-4 text-sm text-river-200">
      <p className="max-w-3xl">
        {`From the ${advice.windows} most recent fine windows (at most 96, within the last 24 hours; stream collectors). For a subset holding a share of the ${settings.weightAttribute}, the 95% interval's half-width as a share of its true value, over the same windows: `}
        <strong>bound</strong> — at most 1.96 / (share × √(k − 1)) for one window, from the variance bound W²/(k − 1) of a priority sample&apos;s total
        (Szegedy, STOC 2006), which holds for any subset because the per-record estimates are uncorrelated; <strong>empirical</strong> — from the kept
        records&apos; v̂ = τ·max(0, τ − w) (Duffield, Lund, Thorup, J. ACM 2007) for a random subset of that share: smaller k is read off the stored samples exactly,
        larger k (marked *) is scaled by (k − 1)/(k′ − 1). Read: to get ±5% on a 1% subset, pick the first k whose 1% column is at most ±5%.
      </p>
      <table className="w-full max-w-3xl text-left font-mono text-xs">
        <thead className="text-river-300">
          <tr>
            <th className="py-1">k</th>
            {ADVISOR_SHARES.map((s) => (
              <th key={s} className="py-1">{`${100 * s}%: bound / empirical`}</th>
            ))}
          </tr>
        </thead>
        <tbody>
          {advice.rows.map((row) => (
            <tr key={row.k} className={row.current ? "text-sand-200" : "text-river-100"}>
              <td className="py-1">{`${row.k}${row.current ? " (current)" : ""}`}</td>
              {row.bound.map((b, i) => (
                <td key={i} className="py-1">{`${percent(b)} / ${percent(row.empirical[i])}${row.scaled ? "*" : ""}`}</td>
              ))}
            </tr>
          ))}
        </tbody>
      </table>
      <p className="max-w-3xl">
        {`Roll-up trade-off (the stored windows rolled up here with the same draws), for a subset holding ${100 * TRADE_OFF_SHARE}% of the ${settings.weightAttribute}; held = ${fineDays} days of fine windows and ${hourlyDays} days of hourly ones:`}
      </p>
      <table className="w-full max-w-3xl text-left font-mono text-xs">
        <thead className="text-river-300">
          <tr>
            <th className="py-1">hourly K</th>
            <th className="py-1">kept / hour fine → hourly</th>
            <th className="py-1">kept records held</th>
            <th className="py-1">1% subset fine → hourly</th>
            <th className="py-1">intervals wider</th>
          </tr>
        </thead>
        <tbody>
          {advice.rollUp.map((t) => (
            <tr key={t.hourlySampleSize} className={t.hourlySampleSize === K ? "text-sand-200" : "text-river-100"}>
              <td className="py-1">{`${t.hourlySampleSize}${t.hourlySampleSize === K ? " (current)" : ""}`}</td>
              <td className="py-1">{`${Math.round(t.keptPerHourFine)} → ${Math.round(t.keptPerHourHourly)}`}</td>
              <td className="py-1">{Math.round(24 * (fineDays * t.keptPerHourFine + hourlyDays * t.keptPerHourHourly)).toLocaleString("en-US")}</td>
              <td className="py-1">{`${percent(t.rseFine)} → ${percent(t.rseHourly)}`}</td>
              <td className="py-1">{Number.isFinite(t.widening) ? `${t.widening.toFixed(2)}×` : "—"}</td>
            </tr>
          ))}
        </tbody>
      </table>
    </div>
  );
}
