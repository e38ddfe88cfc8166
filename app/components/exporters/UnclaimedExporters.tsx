import { Form, useNavigation } from "react-router";
import { age, Button, inputClass } from "~/components/ui";
import type { UnclaimedExporter } from "~/exporters/claims.server";
import { observedDomainLabel, transportLabel } from "~/exporters/format";
import { formatUtc } from "~/slice/format";

const count = (n: number) => n.toLocaleString("en-US");

/**
 * Sources that sent to this deployment and matched no claim, one block per address, one row
 * per (observation domain, transport), each with a claim form prefilled with that address and
 * domain: the admin names the collector and claims with one click.
 */
export function UnclaimedExportersTable({
  exporters,
  now,
  action,
  collectors,
}: {
  exporters: UnclaimedExporter[];
  now: number;
  action: string;
  collectors: string[];
}) {
  const navigation = useNavigation();
  const busy = navigation.state === "submitting" && navigation.formData?.get("intent") === "claim" ? navigation.formData : undefined;
  return (
    <div className="overflow-x-auto">
      <table className="sticky-first w-full min-w-[60rem] text-sm">
        <caption className="sr-only">Sources without a claim: address, observation domain, transport, messages, records, first and last seen, and a claim form</caption>
        <thead className="border-b border-river-700 text-left text-xs text-river-300">
          <tr>
            <th scope="col" className="py-2 pr-3 font-medium">
              Address
            </th>
            <th scope="col" className="py-2 pr-3 font-medium">
              Domain · transport
            </th>
            <th scope="col" className="py-2 pr-3 text-right font-medium">
              Messages
              <span className="block font-normal">dropped unclaimed</span>
            </th>
            <th scope="col" className="py-2 pr-3 text-right font-medium">
              Records
            </th>
            <th scope="col" className="py-2 pr-3 font-medium">
              Seen
            </th>
            <th scope="col" className="py-2 font-medium">
              Claim for collector
            </th>
          </tr>
        </thead>
        <tbody>
          {exporters.map((u) =>
            u.domains.map((d, i) => {
              // A message too short to carry a domain can only be claimed for every domain.
              const domain = d.domainId < 0 ? "" : String(d.domainId);
              const id = `claim-${u.address}-${d.domainId}-${d.transport}`.replace(/[^A-Za-z0-9-]/g, "-");
              const submitting = busy?.get("cidr") === u.address && busy?.get("domain") === domain;
              return (
                <tr
                  key={`${d.domainId}|${d.transport}`}
                  className={`align-top ${i === u.domains.length - 1 ? "border-b border-river-800/70" : ""}`}
                  data-unclaimed={`${u.address}|${d.domainId}`}
                >
                  {i === 0 ? (
                    <th scope="rowgroup" rowSpan={u.domains.length} className="py-2 pr-3 text-left font-mono font-normal text-river-50">
                      {u.address}
                    </th>
                  ) : null}
                  <td className="py-2 pr-3">
                    <span className="font-mono text-river-100">{observedDomainLabel(d.domainId)}</span>
                    <span className="block text-xs text-river-300">{transportLabel(d.transport)}</span>
                  </td>
                  <td className="py-2 pr-3 text-right font-mono text-river-100" title={`${count(d.messages)} messages received, ${count(d.unclaimedMessages)} dropped for want of a claim`}>
                    {count(d.messages)}
                    <span className="block text-xs text-river-300">{count(d.unclaimedMessages)}</span>
                  </td>
                  <td className="py-2 pr-3 text-right font-mono text-river-100">{count(d.records)}</td>
                  <td className="py-2 pr-3 whitespace-nowrap text-river-200">
                    <span className="block" title={`Last seen ${formatUtc(d.lastSeenAt)}`}>
                      {age(now, d.lastSeenAt)}
                    </span>
                    <span className="block text-xs text-river-300" title={`First seen ${formatUtc(d.firstSeenAt)}`}>
                      since {formatUtc(d.firstSeenAt).replace(" UTC", "")}
                    </span>
                  </td>
                  <td className="py-2">
                    <Form method="post" action={action} preventScrollReset className="flex flex-wrap items-center gap-2">
                      <input type="hidden" name="intent" value="claim" />
                      <input type="hidden" name="cidr" value={u.address} />
                      <input type="hidden" name="domain" value={domain} />
                      <label htmlFor={id} className="sr-only">
                        Collector for {u.address}, domain {observedDomainLabel(d.domainId)}
                      </label>
                      <input
                        id={id}
                        name="collector"
                        list="exporter-collectors"
                        required
                        autoComplete="off"
                        spellCheck={false}
                        placeholder="collector"
                        className={`${inputClass} w-40 py-1 font-mono`}
                      />
                      <Button type="submit" tone="quiet" className="py-1" disabled={submitting}>
                        {submitting ? "Claiming…" : `Claim ${domain === "" ? "(every domain)" : `domain ${domain}`}`}
                      </Button>
                    </Form>
                  </td>
                </tr>
              );
            }),
          )}
        </tbody>
      </table>
      <datalist id="exporter-collectors">
        {collectors.map((c) => (
          <option key={c} value={c} />
        ))}
      </datalist>
    </div>
  );
}
