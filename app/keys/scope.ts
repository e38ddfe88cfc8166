/** What a key may do, as the Keys form offers it; `both` is stored as "ingest,query". */
export const SCOPE_CHOICES = ["ingest", "query", "both"] as const;
export type ScopeChoice = (typeof SCOPE_CHOICES)[number];

/** One sentence per choice, shown beside the form's radio buttons. */
export const SCOPE_HELP: Record<ScopeChoice, { label: string; help: string }> = {
  ingest: {
    label: "Ingest",
    help: "Posts flow records to /api/v1/flows and imports sample files (/api/v1/samples) into this collector only, never another. For exporters, collectors and replay scripts.",
  },
  query: {
    label: "Query",
    help: "Reads estimates from /api/v1/estimate for the whole tenant, every collector. For dashboards and scripts that ask questions.",
  },
  both: {
    label: "Both",
    help: "Ingest and query with one key. Handy for a first test; separate keys limit what a leaked key can do.",
  },
};

/** The stored scopes as a person reads them. */
export function scopeLabel(scopes: string): string {
  return scopes === "ingest,query" ? "ingest + query" : scopes;
}
