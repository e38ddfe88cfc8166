import { ApiError, coordinationKeyOf } from "~/auth/api-keys.server";
import { recordAudit } from "~/audit.server";
import type { Db } from "~/db/client.server";
import type { Tenant } from "~/db/schema.server";
import { ensureCollector } from "~/tenants.server";
import type { IpfixFileSummary } from "./ipfix-body";
import { invalidRecords, type FlowBodyParser, type RecordProblem } from "./body.server";
import type { ReservoirManager } from "./manager.server";

/** Most flow records one uploaded IPFIX file may hold (a larger capture is split, or sent to the listeners). */
export const IPFIX_UPLOAD_MAX_RECORDS = 1_000_000;

/** What the Merge page's upload answers for an IPFIX file. */
export interface IpfixUploadSummary {
  kind: "ipfix";
  collector: string;
  accepted: number;
  windows: number;
  from: string | null;
  to: string | null;
  ipfix: IpfixFileSummary;
}

/** True when the upload is an IPFIX file (RFC 5655) rather than a sample file: by name, or by its first message's version 10. */
export function isIpfixUpload(name: string, bytes: Uint8Array): boolean {
  if (/\.ipfix$/i.test(name)) return true;
  return bytes.byteLength >= 16 && bytes[0] === 0 && bytes[1] === 10;
}

/**
 * Stores an uploaded IPFIX file in a stream collector of the tenant as one atomic ingest batch,
 * exactly as `POST /api/v1/flows` with `Content-Type: application/ipfix` does, and records it
 * in the Ledger. Throws the ApiError to answer when the file is refused.
 */
export async function ingestIpfixUpload(
  ctx: { db: Db; manager: ReservoirManager; parser: FlowBodyParser; maxBodyBytes: number },
  tenant: Tenant,
  collectorName: string,
  bytes: Uint8Array<ArrayBuffer>,
  actor: { id: number | null; label: string },
): Promise<IpfixUploadSummary> {
  const collector = await ensureCollector(ctx.db, tenant.id, collectorName);
  const outcome = await ctx.parser.parse({
    body: bytes,
    ndjson: false,
    ipfix: true,
    gzip: false,
    limits: { maxBodyBytes: ctx.maxBodyBytes, maxRecords: IPFIX_UPLOAD_MAX_RECORDS },
  });
  if (!outcome.ok) throw new ApiError(outcome.status, outcome.code, outcome.message, outcome.extra);
  const ipfix = outcome.ipfix!;
  const answer = await ctx.manager
    .ingest({
      tenant: {
        id: tenant.id,
        sampleSize: tenant.sampleSize,
        windowSeconds: tenant.windowSeconds,
        weightAttribute: tenant.weightAttribute,
        coordinationKey: coordinationKeyOf(tenant),
        retentionDays: tenant.retentionDays,
        hourlyRetentionDays: tenant.hourlyRetentionDays,
      },
      collector,
      records: outcome.packed,
      // The manager's clock: flow times are checked against it.
      receivedAt: ctx.manager.now(),
      source: "ipfix-file",
    })
    .catch((error: unknown) => {
      // Records refused for their times (app/ingest/time-check.ts), matched by code: the error comes from the server's modules.
      const refused = error as { code?: unknown; details?: RecordProblem[]; invalidCount?: number };
      if (refused?.code === "weir_times_refused") throw invalidRecords(refused.details ?? [], refused.invalidCount ?? 0);
      throw error;
    });
  await recordAudit(ctx.db, {
    tenantId: tenant.id,
    actor,
    action: "ipfix.upload",
    target: collector.name,
    detail: { messages: ipfix.messages, records: ipfix.records, unusable: ipfix.unusable, samplingInterval: ipfix.samplingInterval },
  });
  const starts = answer.windows.map((w) => w.start).sort();
  const ends = answer.windows.map((w) => w.end).sort();
  return {
    kind: "ipfix",
    collector: collector.name,
    accepted: answer.accepted,
    windows: answer.windows.length,
    from: starts[0] ?? null,
    to: ends.at(-1) ?? null,
    ipfix,
  };
}
