import { Link, useNavigation, useSearchParams } from "react-router";
import type { MergeListing } from "~/merges/answer";
import { defaultSliceState, sliceSearch } from "~/slice/query-state";
import { ConfirmRow } from "../ui";
import { count, utcMinute } from "./format";

/** The tenant's merges with their provenance, newest first; Delete asks once more before it acts. */
export function MergeList({ tenantSlug, merges }: { tenantSlug: string; merges: MergeListing[] }) {
  const [search] = useSearchParams();
  const confirming = search.get("delete");
  const navigation = useNavigation();
  const deleting = navigation.state === "submitting" && navigation.formData?.get("intent") === "delete";
  return (
    <div className="overflow-x-auto">
      <table className="w-full text-left text-sm">
        <caption className="sr-only">Merges of this tenant, newest first</caption>
        <thead className="border-b border-river-700 text-xs tracking-wide text-river-300 uppercase">
          <tr>
            {["Name", "Inputs", "Range (UTC)", "Sample size", "Coordinated", "Windows", "Kept", "Duplicates", "Created by", "Created (UTC)"].map((h) => (
              <th key={h} scope="col" className="py-2 pr-4 font-medium">
                {h}
              </th>
            ))}
            <th scope="col" className="relative py-2 font-medium">
              <span className="sr-only">Actions</span>
            </th>
          </tr>
        </thead>
        <tbody>
          {merges.map((m) => (
            <MergeRows key={m.name} merge={m} tenantSlug={tenantSlug} confirm={confirming === m.name} deleting={deleting} />
          ))}
        </tbody>
      </table>
    </div>
  );
}

function MergeRows({ merge: m, tenantSlug, confirm, deleting }: { merge: MergeListing; tenantSlug: string; confirm: boolean; deleting: boolean }) {
  const slice = sliceSearch({ ...defaultSliceState(), range: { from: m.from, to: m.to }, lists: { ...defaultSliceState().lists, collectors: [m.name] } });
  return (
    <>
      <tr className="border-b border-river-800 align-top" data-merge={m.name}>
        <td className="py-2.5 pr-4 font-mono text-river-50">{m.name}</td>
        <td className="py-2.5 pr-4 font-mono text-xs">{m.inputs.join(", ")}</td>
        <td className="py-2.5 pr-4 font-mono text-xs whitespace-nowrap">
          {utcMinute(m.from)} – {utcMinute(m.to)}
        </td>
        <td className="py-2.5 pr-4 font-mono">{count(m.sampleSize)}</td>
        <td className="py-2.5 pr-4">{m.coordinated ? "yes" : "no"}</td>
        <td className="py-2.5 pr-4 font-mono">{count(m.windows)}</td>
        <td className="py-2.5 pr-4 font-mono">{count(m.kept)}</td>
        <td className="py-2.5 pr-4 font-mono">{m.coordinated ? count(m.duplicatesDropped) : "—"}</td>
        <td className="py-2.5 pr-4">{m.createdBy}</td>
        <td className="py-2.5 pr-4 font-mono text-xs whitespace-nowrap">{utcMinute(m.createdAt)}</td>
        <td className="py-2.5 text-right whitespace-nowrap">
          <Link to={`/t/${tenantSlug}/slice${slice === "" ? "" : `?${slice}`}`} className="mr-3 text-sm text-river-100 underline-offset-4 hover:underline">
            Slice
          </Link>
          {confirm ? null : (
            <Link
              to={`?delete=${encodeURIComponent(m.name)}`}
              preventScrollReset
              className="text-sm text-red-200 underline-offset-4 hover:underline"
              aria-label={`Delete merge ${m.name}`}
            >
              Delete
            </Link>
          )}
        </td>
      </tr>
      {confirm ? (
        <ConfirmRow
          colSpan={11}
          action={`/t/${tenantSlug}/merge`}
          fields={{ intent: "delete", name: m.name }}
          message={`Delete the merge ${m.name} and its ${count(m.windows)} merged windows? Its inputs (${m.inputs.join(", ")}) are not touched; questions naming ${m.name} will find nothing.`}
          label="Delete merge"
          busyLabel="Deleting…"
          busy={deleting}
        />
      ) : null}
    </>
  );
}
