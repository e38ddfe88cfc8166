import type { ClaimedExporter } from "~/exporters/claims.server";
import { claimDomainLabel, observedDomainLabel, transportLabel } from "~/exporters/format";
import { formatUtc } from "~/slice/format";
import { age } from "~/components/ui";

/** A rate older than this is not shown as current: the exporter has gone quiet. */
const RATE_FRESH_MS = 60_000;

const count = (n: number) => n.toLocaleString("en-US");
const rate = (perSecond: number) => perSecond.toLocaleString("en-US", { minimumFractionDigits: 1, maximumFractionDigits: 1 });


/**
 * The exporters that feed the tenant: per (address, observation domain, transport), the
 * counters the listeners keep, the sampling they announced and the templates in use.
 */
export function ClaimedExportersTable({ exporters, now }: { exporters: ClaimedExporter[]; now: number }) {
  const scaled = exporters.filter((e) => e.samplingInterval !== null);
  return (
    <div className="flex flex-col gap-3">
      <div className="overflow-x-auto">
        <table className="sticky-first w-full min-w-[72rem] text-sm">
          <caption className="sr-only">
            Exporters feeding this tenant's collectors: records per second, records decoded, records lost in transport, data sets that waited for a template,
            malformed messages, unusable records, announced sampling, templates and enterprise elements, first and last seen
          </caption>
          <thead className="border-b border-river-700 text-left text-xs text-river-300">
            <tr>
              <th scope="col" className="py-2 pr-3 font-medium">
                Exporter
                <span className="block font-normal">domain · transport</span>
              </th>
              <th scope="col" className="py-2 pr-3 font-medium">
                Collector
                <span className="block font-normal">claim</span>
              </th>
              <th scope="col" className="py-2 pr-3 text-right font-medium">
                Records/s
              </th>
              <th scope="col" className="py-2 pr-3 text-right font-medium">
                Records
              </th>
              <th scope="col" className="py-2 pr-3 text-right font-medium">
                Lost
                <span className="block font-normal">sequence gaps</span>
              </th>
              <th scope="col" className="py-2 pr-3 text-right font-medium">
                Waited
                <span className="block font-normal">for a template</span>
              </th>
              <th scope="col" className="py-2 pr-3 text-right font-medium">
                Malformed
                <span className="block font-normal">messages</span>
              </th>
              <th scope="col" className="py-2 pr-3 text-right font-medium">
                Unusable
                <span className="block font-normal">records</span>
              </th>
              <th scope="col" className="py-2 pr-3 font-medium">
                Sampling
              </th>
              <th scope="col" className="py-2 pr-3 font-medium">
                Templates
              </th>
              <th scope="col" className="py-2 font-medium">
                Seen
              </th>
            </tr>
          </thead>
          <tbody>
            {exporters.map((e) => (
              <ExporterRow key={`${e.address}|${e.domainId}|${e.transport}`} e={e} now={now} />
            ))}
          </tbody>
        </table>
      </div>
      <p className="text-xs text-river-300">
        Lost: gaps in the exporter's sequence numbers (IPFIX counts data records, NetFlow v9 counts export packets); an exporter's restart is not counted.
        Waited: data sets (groups of records) that arrived before their template, held up to a minute and decoded when it came; the dropped ones are counted apart. Unusable: records without addresses,
        protocol, or positive byte and packet counts, not stored.
        {scaled.length > 0
          ? ` ${scaled.length} of ${exporters.length} announce packet sampling: their byte and packet counters are multiplied by the interval before sampling, so estimates stand for the traffic, not the sampled packets.`
          : " No exporter announces packet sampling: counters are taken as sent."}{" "}
        Times in UTC on hover.
      </p>
    </div>
  );
}

function ExporterRow({ e, now }: { e: ClaimedExporter; now: number }) {
  const fresh = now - e.lastSeenAt <= RATE_FRESH_MS;
  return (
    <tr className="border-b border-river-800/70 align-top last:border-0" data-exporter={`${e.address}|${e.domainId}|${e.transport}`}>
      <th scope="row" className="py-2 pr-3 text-left font-normal">
        <span className="font-mono text-river-50">{e.address}</span>
        <span className="block text-xs text-river-300">
          domain {observedDomainLabel(e.domainId)} · {transportLabel(e.transport)}
        </span>
      </th>
      <td className="py-2 pr-3">
        <span className="font-mono text-river-100">{e.collector}</span>
        <span className="block font-mono text-xs text-river-300" title={`Matched the claim ${e.claim.cidr}, ${claimDomainLabel(e.claim.domainId)}`}>
          {e.claim.cidr}
          {e.claim.domainId === null ? "" : ` · ${e.claim.domainId}`}
        </span>
      </td>
      <td className="py-2 pr-3 text-right font-mono" title={fresh ? "Over the last interval the listeners wrote" : `No message for ${age(now, e.lastSeenAt).replace(" ago", "")}`}>
        {fresh ? <span className="text-river-100">{rate(e.recordsPerSecond)}</span> : <span className="text-river-400">0.0</span>}
      </td>
      <td className="py-2 pr-3 text-right font-mono text-river-100" title={`${count(e.records)} records in ${count(e.messages)} messages`}>
        {count(e.records)}
      </td>
      <td className="py-2 pr-3 text-right font-mono">
        <span className={e.lost > 0 ? "text-sand-200" : "text-river-300"}>{count(e.lost)}</span>
        <span className="block font-sans text-xs text-river-300">{e.lostUnit}</span>
      </td>
      <td
        className="py-2 pr-3 text-right font-mono"
        title={`${count(e.waiting)} data sets arrived before their template; ${count(e.droppedWaiting)} of them were dropped because it did not come in time`}
      >
        <span className={e.droppedWaiting > 0 ? "text-sand-200" : "text-river-100"}>{count(e.waiting)}</span>
        {e.droppedWaiting > 0 ? <span className="block font-sans text-xs text-sand-200">{count(e.droppedWaiting)} dropped</span> : null}
      </td>
      <td className="py-2 pr-3 text-right font-mono" title={e.lastError ? `Last error: ${e.lastError}` : "No malformed message"}>
        <span className={e.malformed > 0 ? "text-red-200 underline decoration-dotted underline-offset-4" : "text-river-300"}>{count(e.malformed)}</span>
      </td>
      <td className="py-2 pr-3 text-right font-mono">
        <span className={e.unusable > 0 ? "text-sand-200" : "text-river-300"}>{count(e.unusable)}</span>
      </td>
      <td className="py-2 pr-3">
        {e.samplingInterval === null ? (
          <span className="text-river-300">none announced</span>
        ) : (
          <span
            className="rounded border border-sand-400/70 px-1.5 py-px font-mono text-xs whitespace-nowrap text-sand-200"
            title={`The exporter announced packet sampling of 1 in ${count(e.samplingInterval)}: its byte and packet counters are multiplied by ${count(e.samplingInterval)}`}
          >
            counters ×{count(e.samplingInterval)}
          </span>
        )}
      </td>
      <td className="py-2 pr-3">
        <Templates e={e} now={now} />
      </td>
      <td className="py-2 whitespace-nowrap text-river-200">
        <span className="block" title={`Last seen ${formatUtc(e.lastSeenAt)}`}>
          {age(now, e.lastSeenAt)}
        </span>
        <span className="block text-xs text-river-300" title={`First seen ${formatUtc(e.firstSeenAt)}`}>
          since {formatUtc(e.firstSeenAt).replace(" UTC", "")}
        </span>
      </td>
    </tr>
  );
}

/** The templates in use and the enterprise-specific elements skipped, folded away until asked for. */
function Templates({ e, now }: { e: ClaimedExporter; now: number }) {
  const skipped = e.enterpriseElements.reduce((sum, x) => sum + x.count, 0);
  if (e.templates.length === 0 && e.enterpriseElements.length === 0) return <span className="text-river-300">none yet</span>;
  return (
    <details className="max-w-md">
      <summary className="cursor-pointer text-river-100 marker:text-river-400">
        {e.templates.length} template{e.templates.length === 1 ? "" : "s"}
        {skipped > 0 ? <span className="text-river-300"> · {count(skipped)} enterprise fields skipped</span> : null}
      </summary>
      <ul className="mt-2 flex flex-col gap-2">
        {e.templates.map((t) => (
          <li key={t.id} className="text-xs">
            <span className="font-mono text-river-50">{t.id}</span>
            {t.options ? <span className="ml-1 text-river-300">(options)</span> : null}
            <span className="ml-2 text-river-300" title={formatUtc(t.refreshedAt)}>
              refreshed {age(now, t.refreshedAt)}
            </span>
            <span className="block font-mono break-words text-river-200">{t.fields.join(", ")}</span>
          </li>
        ))}
      </ul>
      {e.enterpriseElements.length > 0 ? (
        <div className="mt-2 text-xs">
          <p className="text-river-300">Enterprise-specific elements skipped (enterprise number . element id):</p>
          <ul className="font-mono text-river-200">
            {e.enterpriseElements.map((x) => (
              <li key={`${x.enterprise}.${x.id}`}>
                e{x.enterprise}.{x.id} ×{count(x.count)}
              </li>
            ))}
          </ul>
        </div>
      ) : null}
    </details>
  );
}
