// Mutation testing (StrykerJS, https://stryker-mutator.io): `npm run mutate` changes the scoped
// code one small fault at a time (an operator, a condition, a constant) and runs the tests that
// cover it; a mutant the tests do not notice "survives". Scoped to the code where a silent
// fault costs most. Slow (not in CI): one folder at a time with
// `npm run mutate -- --mutate "app/sampling/**/*.ts"`. Survivors judged equivalent (no test
// could tell them apart) are listed with the reason in docs/testing.md.
/** @type {import("@stryker-mutator/api/core").PartialStrykerOptions} */
export default {
  testRunner: "vitest",
  plugins: ["@stryker-mutator/vitest-runner"],
  vitest: { configFile: "vitest.mutate.config.ts", related: false },
  mutate: [
    "app/sampling/**/*.ts",
    "app/auth/**/*.ts",
    "app/query/**/*.ts",
    "app/ingest/manager.server.ts",
    "app/retention/**/*.ts",
    "app/samples/store.server.ts",
    "app/ipfix/decoder.ts",
  ],
  coverageAnalysis: "perTest",
  // Mutants in code that runs when a module loads (constant tables) would each rerun every
  // test; they are reported as ignored, and counted apart in docs/testing.md.
  ignoreStatic: true,
  concurrency: 2,
  timeoutMS: 60_000,
  // The first run of every scoped test, with coverage per test, before any mutant.
  dryRunTimeoutMinutes: 30,
  reporters: ["clear-text", "progress", "html"],
  htmlReporter: { fileName: "reports/mutation/index.html" },
  clearTextReporter: {
    allowColor: false,
    logTests: false,
    reportScoreTable: true,
  },
  tempDirName: ".stryker-tmp",
  cleanTempDir: "always",
};
