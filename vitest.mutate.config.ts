import { defineConfig } from "vitest/config";
import base from "./vitest.config";

// The tests `npm run mutate` (StrykerJS) runs against each mutant: those of the scoped code
// (stryker.config.mjs), without the browser and production-build tests, which test the
// console and the build rather than the scoped modules and would make every mutant cost minutes.
// MUTATE_TESTS narrows them to some folders or test files (comma-separated), e.g.
// MUTATE_TESTS=tests/sampling for a score of app/sampling against its own unit tests alone
// (a lower bound: the integration tests left out may kill more).
const narrowed = process.env.MUTATE_TESTS?.split(",").map((entry) =>
  entry.endsWith(".test.ts") ? entry : `${entry.replace(/\/$/, "")}/**/*.test.ts`,
);

// Spread, not mergeConfig: that would append these to the base config's include of every test.
export default defineConfig({
  ...base,
  test: {
    ...base.test,
    // Instrumented code runs many times slower; a Monte Carlo test takes minutes there.
    testTimeout: 900_000,
    hookTimeout: 900_000,
    // The interval-coverage simulations (thousands of trials per size class) check calibration,
    // not code paths the unit tests leave out; under instrumentation each would cost minutes per mutant.
    exclude: [...(base.test?.exclude ?? ["**/node_modules/**"]), "tests/sampling/coverage.test.ts"],
    include: narrowed ?? [
      "tests/sampling/**/*.test.ts",
      "tests/query/**/*.test.ts",
      "tests/ingest/**/*.test.ts",
      "tests/retention/**/*.test.ts",
      "tests/samples/**/*.test.ts",
      "tests/merges/**/*.test.ts",
      "tests/ipfix/**/*.test.ts",
      "tests/calibration/**/*.test.ts",
    ],
  },
});
