import type { CollectorSources, IntakeCollector, IntakeSnapshot, OpenReservoir, SourceUse } from "~/routes/console.intake-data";
import { counterValue, exactMetric, exactRate, formatBytes, formatMetric, formatRate, formatUtc } from "~/slice/format";
import { toRate, windowSecondsSoFar } from "~/query/rate";
import { age } from "~/components/ui";

const timeOfDay = (ms: number) => new Date(ms).toISOString().slice(11, 16);


const rate = (perSecond: number) => perSecond.toLocaleString("en-US", { minimumFractionDigits: 1, maximumFractionDigits: 1 });

function windowLength(seconds: number): string {
  return seconds % 3600 === 0 ? `${seconds / 3600} h` : `${seconds / 60} min`;
}

/** Ingest health per collector: rate, exact bytes per window, fill and τ of the open window, last seen. */
export function IntakeTable({ snapshot }: { snapshot: IntakeSnapshot }) {
  const { windows, collectors, now } = snapshot;
  const open = windows[windows.length - 1];
  const windowMs = snapshot.windowSeconds * 1000;
  const totals = windows.map((_, i) => collectors.reduce((sum, c) => sum + BigInt(c.windows[i].bytes), 0n));
  const totalRate = collectors.reduce((sum, c) => sum + c.recordsPerSecond, 0);
  const quiet = collectors.filter((c) => c.quiet).length;

  return (
    <div className="flex flex-col gap-3">
      <p className="text-sm text-river-300">
        Windows of {windowLength(snapshot.windowSeconds)} · k = {snapshot.sampleSize} per reservoir · weight: {snapshot.weightAttribute} · open window{" "}
        {timeOfDay(open)}–{timeOfDay(open + windowMs)} UTC · as of {new Date(now).toISOString().slice(11, 19)} UTC
        {quiet > 0 ? (
          <>
            {" "}
            · <span className="text-sand-200">{quiet} quiet</span>
          </>
        ) : null}
      </p>
      <div className="overflow-x-auto">
        <table className="sticky-first w-full min-w-[60rem] text-sm">
          <caption className="sr-only">
            Ingest health per collector: records per second over the last {snapshot.rateSeconds} s, exact bytes of the last {windows.length} windows, reservoir
            fill and threshold τ of the open window, and when the collector was last seen
          </caption>
          <thead>
            <tr className="text-left text-xs text-river-300">
              <th scope="col" rowSpan={2} className="py-2 pr-3 align-bottom font-medium">
                Collector
              </th>
              <th scope="col" rowSpan={2} className="py-2 pr-3 text-right align-bottom font-medium">
                Records/s
                <span className="block font-normal">last {snapshot.rateSeconds} s</span>
              </th>
              <th scope="colgroup" colSpan={windows.length} className="border-b border-river-800 px-3 pt-2 pb-1 text-center font-medium">
                Bytes and bit/s per window (exact, UTC start)
              </th>
              <th scope="col" rowSpan={2} className="py-2 pr-3 pl-3 align-bottom font-medium">
                Reservoir fill
                <span className="block font-normal">open window, kept / k</span>
              </th>
              <th scope="col" rowSpan={2} className="py-2 pr-3 text-right align-bottom font-medium">
                τ<span className="block font-normal">open window</span>
              </th>
              <th scope="col" rowSpan={2} className="py-2 align-bottom font-medium">
                Last seen
              </th>
              <th
                scope="col"
                rowSpan={2}
                className="py-2 pl-3 text-right align-bottom font-medium"
                title="Flow times checked on arrival, counted since the collector was created"
              >
                Record times
                <span className="block font-normal">late · clock ahead · refused</span>
              </th>
              <th
                scope="col"
                rowSpan={2}
                className="py-2 pl-3 text-right align-bottom font-medium"
                title="Fields of JSON records that name an IANA IPFIX element Weir does not store, summed over records since the collector was created"
              >
                Ignored fields
                <span className="block font-normal">IPFIX elements not stored</span>
              </th>
            </tr>
            <tr className="border-b border-river-700 text-xs text-river-300">
              {windows.map((start) => (
                <th key={start} scope="col" className="px-3 py-1 text-right font-mono font-normal" title={formatUtc(start)}>
                  {timeOfDay(start)}
                  {start === open ? <span className="ml-1 font-sans text-sand-300">open</span> : null}
                </th>
              ))}
            </tr>
          </thead>
          <tbody>
            {collectors.map((c) => (
              <CollectorRow key={c.name} c={c} snapshot={snapshot} />
            ))}
          </tbody>
          {collectors.length > 1 ? (
            <tfoot>
              <tr className="border-t border-river-700 text-river-200">
                <th scope="row" className="py-2 pr-3 text-left font-medium">
                  All collectors
                </th>
                <td className="py-2 pr-3 text-right font-mono">{rate(totalRate)}</td>
                {totals.map((bytes, i) => (
                  <td key={windows[i]} className="px-3 py-2 text-right font-mono" title={exactMetric(bytes.toString(), "bytes")}>
                    {formatBytes(Number(bytes))}
                    <BitRate bytes={Number(bytes)} start={windows[i]} snapshot={snapshot} />
                  </td>
                ))}
                <td colSpan={3} />
                <td colSpan={2} />
              </tr>
            </tfoot>
          ) : null}
        </table>
      </div>
      <p className="text-xs text-river-300">
        Quiet: no batch for more than {snapshot.quietAfterWindows} windows ({windowLength(snapshot.quietAfterWindows * snapshot.windowSeconds)}), or never (a collector fed only by uploaded
        sample files shows "imports only" instead).
        Records per second count the batches received; bytes per window count each record in the window of its start time, late ones included; bit/s
        is those exact bytes × 8 ÷ the window's length (the open window: ÷ the seconds passed so far).
        Under each name, where its records come from: API keys (JSON over HTTP), claimed exporters (IPFIX and NetFlow v9 listeners) and IPFIX files; bright when
        records arrived that way in the last {snapshot.sourcesHours} h.
        Record times count, since each collector was created, records accepted late (start before the open window), accepted with a time ahead of the server
        clock (within the tolerance), and refused for their times; ignored fields count IPFIX elements in JSON records that Weir does not store.
      </p>
    </div>
  );
}

function CollectorRow({ c, snapshot }: { c: IntakeCollector; snapshot: IntakeSnapshot }) {
  return (
    <tr className="border-b border-river-800/70 align-top last:border-0">
      <th scope="row" className="py-2 pr-3 text-left font-normal">
        <span className={`font-mono ${c.quiet ? "text-river-300" : "text-river-50"}`}>{c.name}</span>
        {c.copyOf ? (
          <span className="ml-2 text-xs text-river-300" title="Filled by imported sample files: counted in Slice only when picked">
            copy of {c.copyOf.join(", ")}
          </span>
        ) : null}
        {c.quiet ? (
          <span
            className="ml-2 inline-flex rounded border border-sand-400/70 px-1.5 py-px text-[11px] font-semibold tracking-wide text-sand-200 uppercase"
            title={c.lastSeenAt === null ? "Never sent a batch" : `No batch for more than ${snapshot.quietAfterWindows} windows`}
          >
            quiet
          </span>
        ) : null}
        <Sources sources={c.sources} hours={snapshot.sourcesHours} />
      </th>
      <td
        className="py-2 pr-3 text-right font-mono text-river-100"
        title={`${c.recordsLastMinute.toLocaleString("en-US")} records in ${c.batchesLastMinute} batch${c.batchesLastMinute === 1 ? "" : "es"} over the last ${snapshot.rateSeconds} s`}
      >
        {rate(c.recordsPerSecond)}
      </td>
      {c.windows.map((w) => (
        <td key={w.start} className="px-3 py-2 text-right font-mono" title={`${exactMetric(w.bytes, "bytes")} in ${w.records.toLocaleString("en-US")} records`}>
          <span className={counterValue(w.bytes) === 0 ? "text-river-400" : "text-river-100"}>{formatBytes(counterValue(w.bytes))}</span>
          <span className="block text-xs text-river-300">{w.records.toLocaleString("en-US")} rec</span>
          <BitRate bytes={counterValue(w.bytes)} start={w.start} snapshot={snapshot} />
        </td>
      ))}
      <td className="py-2 pr-3 pl-3">
        {c.open.length === 0 ? <span className="text-river-300">no records yet</span> : c.open.map((r) => <Fill key={r.node} r={r} showNode={c.open.length > 1} />)}
      </td>
      <td className="py-2 pr-3 text-right font-mono">
        {c.open.length === 0
          ? "—"
          : c.open.map((r) => (
              <span key={r.node} className="block" title={r.tau === 0 ? "τ = 0: at most k records so far, every one kept" : exactMetric(r.tau, snapshot.weightAttribute)}>
                {r.tau === 0 ? "0" : formatMetric(r.tau, snapshot.weightAttribute)}
              </span>
            ))}
      </td>
      <td className="py-2 text-river-200">
        {c.lastSeenAt !== null ? (
          <span title={formatUtc(c.lastSeenAt)}>{age(snapshot.now, c.lastSeenAt)}</span>
        ) : c.importsOnly ? (
          <span title="This collector's samples came from uploaded sample files; it has never sent flow records">imports only</span>
        ) : (
          <span className="text-sand-200">never</span>
        )}
      </td>
      <TimeChecks c={c} />
    </tr>
  );
}

/** The collector's time counters and ignored fields (collectors table), each with what it counts. */
function TimeChecks({ c }: { c: IntakeCollector }) {
  const { late, clockSkewed, refused, ignoredFields } = c.timeChecks;
  const count = (n: number) => n.toLocaleString("en-US");
  return (
    <>
      <td className="py-2 pl-3 text-right font-mono whitespace-nowrap">
        <span title="Accepted with a start before the open window (late, within the tenant's retention)" className={late > 0 ? "text-river-100" : "text-river-400"}>
          {count(late)}
        </span>
        <span className="text-river-500"> · </span>
        <span
          title="Accepted with a start or end ahead of the server clock, within INGEST_FUTURE_TOLERANCE_SECONDS (the exporter's clock runs ahead)"
          className={clockSkewed > 0 ? "text-sand-200" : "text-river-400"}
        >
          {count(clockSkewed)}
        </span>
        <span className="text-river-500"> · </span>
        <span
          title="Refused for their times (batches over HTTP answered 400; records from the listeners dropped): too far ahead of the server clock, before INGEST_TIME_FLOOR, or older than the tenant's retention keeps"
          className={refused > 0 ? "text-sand-200" : "text-river-400"}
        >
          {count(refused)}
        </span>
      </td>
      <td
        className="py-2 pl-3 text-right font-mono"
        title="Fields of accepted JSON records that name an IANA IPFIX element Weir does not store (tcpControlBits, vlanId, …); the ingest answer lists them by name"
      >
        <span className={ignoredFields > 0 ? "text-river-100" : "text-river-400"}>{count(ignoredFields)}</span>
      </td>
    </>
  );
}

/**
 * A window's exact bytes as bit/s: × 8 ÷ the window's seconds, or for the open window ÷ the
 * seconds passed so far (rate.ts), marked "so far".
 */
function BitRate({ bytes, start, snapshot }: { bytes: number; start: number; snapshot: IntakeSnapshot }) {
  const seconds = windowSecondsSoFar(start, snapshot.windowSeconds, snapshot.now);
  const open = seconds < snapshot.windowSeconds;
  const bitsPerSecond = toRate(bytes, "bytes", seconds);
  return (
    <span
      className="block text-xs text-river-300"
      data-bit-rate={bitsPerSecond}
      title={`${exactRate(bitsPerSecond, "bytes")}: exact bytes × 8 ÷ ${seconds.toLocaleString("en-US", { maximumFractionDigits: 1 })} s${open ? " passed so far in this open window" : ""}`}
    >
      {formatRate(bitsPerSecond, "bytes")}
      {open ? " so far" : ""}
    </span>
  );
}

function Fill({ r, showNode }: { r: OpenReservoir; showNode: boolean }) {
  const fraction = r.k > 0 ? Math.min(1, r.kept / r.k) : 0;
  return (
    <div className="flex items-center gap-2" title={`${r.kept} of k = ${r.k} kept from ${r.records.toLocaleString("en-US")} records${showNode ? ` on node ${r.node}` : ""}`}>
      <div aria-hidden="true" className="h-2 w-24 overflow-hidden rounded-full bg-river-800">
        <div className="h-full rounded-full bg-sand-300" style={{ width: `${(fraction * 100).toFixed(1)}%` }} />
      </div>
      <span className="font-mono text-xs text-river-100">
        {r.kept}/{r.k}
      </span>
      {showNode ? <span className="text-xs text-river-300">{r.node}</span> : null}
    </div>
  );
}

const plural = (n: number, one: string, many = `${one}s`) => `${n.toLocaleString("en-US")} ${n === 1 ? one : many}`;
const used = (use: SourceUse | undefined) => (use ? `${plural(use.records, "record")} in ${plural(use.batches, "batch", "batches")}` : "nothing");

/**
 * Where a collector's records come from, compactly: "keys 2 · exporters 1 · files". A way in
 * is bright when records arrived over it in the last `hours`, dim when it could feed the
 * collector (an active key, a claim) but did not.
 */
function Sources({ sources, hours }: { sources: CollectorSources; hours: number }) {
  const { received, activeKeys, exporterClaims } = sources;
  const listeners = [received["ipfix-udp"], received["ipfix-tcp"], received["netflow9-udp"]].filter((u): u is SourceUse => u !== undefined);
  const fromListeners = listeners.length === 0 ? undefined : listeners.reduce((a, b) => ({ batches: a.batches + b.batches, records: a.records + b.records }));
  const parts: { label: string; active: boolean; title: string }[] = [];
  if (activeKeys > 0 || received.json) {
    parts.push({
      label: `keys ${activeKeys}`,
      active: received.json !== undefined,
      title: `${plural(activeKeys, "active ingest key")}; JSON over HTTP in the last ${hours} h: ${used(received.json)}`,
    });
  }
  if (exporterClaims > 0 || fromListeners) {
    const perTransport = (["ipfix-udp", "ipfix-tcp", "netflow9-udp"] as const)
      .filter((t) => received[t])
      .map((t) => `${t === "netflow9-udp" ? "NetFlow v9 over UDP" : t === "ipfix-tcp" ? "IPFIX over TCP" : "IPFIX over UDP"}: ${used(received[t])}`);
    parts.push({
      label: `exporters ${exporterClaims}`,
      active: fromListeners !== undefined,
      title: `${plural(exporterClaims, "exporter claim")}; from the listeners in the last ${hours} h: ${perTransport.length > 0 ? perTransport.join("; ") : "nothing"}`,
    });
  }
  if (received["ipfix-file"]) {
    parts.push({ label: "files", active: true, title: `IPFIX files posted in the last ${hours} h: ${used(received["ipfix-file"])}` });
  }
  if (parts.length === 0) {
    return (
      <span className="block text-xs text-river-400" title="No active ingest key, no exporter claim, and nothing received in the last day">
        no key or exporter
      </span>
    );
  }
  return (
    <span className="block text-xs" data-sources>
      {parts.map((p, i) => (
        <span key={p.label} title={p.title}>
          {i > 0 ? <span className="text-river-500"> · </span> : null}
          <span className={p.active ? "text-river-100" : "text-river-400"}>{p.label}</span>
        </span>
      ))}
    </span>
  );
}
