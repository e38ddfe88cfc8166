// The real parse worker, except that its thread dies in the middle of parsing a body that
// is exactly '"crash the parse worker"' (see parse-pool.test.ts), as a fault would take a
// worker down.
const parse = JSON.parse;
JSON.parse = (text, reviver) => {
  if (text === '"crash the parse worker"') process.exit(70);
  return parse(text, reviver);
};
await import("../../app/ingest/parse-worker-entry.mjs");
