// Writes docs/query-fields.md from the query field table (app/query/fields.ts); a test checks
// the committed file equals what the table gives. Run after changing the table:
//   npx tsx scripts/docs-query-fields.ts
import { writeFileSync } from "node:fs";
import { fileURLToPath } from "node:url";
import { queryFieldsMarkdown } from "~/query/fields";

const path = fileURLToPath(new URL("../docs/query-fields.md", import.meta.url));
writeFileSync(path, queryFieldsMarkdown());
console.log(`wrote ${path}`);
