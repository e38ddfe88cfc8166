import { reactRouter } from "@react-router/dev/vite";
import tailwindcss from "@tailwindcss/vite";
import { fileURLToPath } from "node:url";
import { defineConfig } from "vite";

export default defineConfig({
  plugins: [tailwindcss(), reactRouter()],
  // Vite does not read tsconfig "paths"; keep this alias in step with tsconfig.json.
  resolve: { alias: { "~": fileURLToPath(new URL("./app", import.meta.url)) } },
  // Found late by the dependency scan (they are imported by console components only), which
  // made Vite re-bundle on the first console visit; list them so it bundles them up front.
  optimizeDeps: { include: ["swr", "uplot"] },
});
