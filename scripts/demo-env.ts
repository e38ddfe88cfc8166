// Imported first by scripts/demo.ts: demo mode and a production build must be in the
// environment before any module loads React, which picks its development or production
// build from NODE_ENV when first loaded. Set later (in demo.ts's body, after its imports
// ran), React would load as development while the build's react-dom/server is production,
// and every console page would answer 500.
process.env.WEIR_DEMO = "1";
process.env.NODE_ENV = "production";
