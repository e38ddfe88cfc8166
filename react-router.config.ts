import type { Config } from "@react-router/dev/config";

export default {
  // Server-side rendering: loaders and actions run in the Express host (server.ts).
  ssr: true,
} satisfies Config;
