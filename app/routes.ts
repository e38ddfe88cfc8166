import { type RouteConfig, index, layout, prefix, route } from "@react-router/dev/routes";

export default [
  index("routes/home.tsx"),
  route("healthz", "routes/healthz.ts"),
  route("api/v1/flows", "routes/api.v1.flows.ts"),
  route("api/v1/estimate", "routes/api.v1.estimate.ts"),
  route("api/v1/samples", "routes/api.v1.samples.ts"),
  route("api/v1/merge", "routes/api.v1.merge.ts"),
  route("api/v1/calibration", "routes/api.v1.calibration.ts"),

  route("signin", "routes/signin.tsx"),
  route("signout", "routes/signout.ts"),
  route("auth/github", "routes/auth.github.ts"),
  route("auth/github/callback", "routes/auth.github.callback.ts"),
  route("console", "routes/console.index.tsx"),
  route("invite/:token", "routes/invite.tsx"),
  // Development and demo only: answers 404 unless the local fake SMTP server is in use (never with SMTP_URL set).
  route("dev/mail", "routes/dev.mail.tsx"),

  // The console of one tenant; every child checks membership and role again on the server.
  route("t/:tenant", "routes/console.tsx", [
    index("routes/console.tenant-index.ts"),
    route("slice", "routes/console.slice.tsx"),
    route("intake", "routes/console.intake.tsx"),
    // JSON for the Intake page's polling (a resource route: no component).
    route("intake-data", "routes/console.intake-data.ts"),
    // How often closed windows' intervals covered their exact totals; linked from Intake, not the main nav.
    route("calibration", "routes/console.calibration.tsx"),
    route("exporters", "routes/console.exporters.tsx"),
    // JSON for the Exporters page's polling (a resource route: no component).
    route("exporters-data", "routes/console.exporters-data.ts"),
    route("merge", "routes/console.merge.tsx"),
    // Sample-file uploads from the Merge page (a resource route: multipart in, JSON out).
    route("merge/upload", "routes/console.merge-upload.ts"),
    // Sample-file downloads from the Merge page (a resource route: a query in, the file out).
    route("merge/export", "routes/console.merge-export.ts"),
    route("keys", "routes/console.keys.tsx"),
    route("settings", "routes/console.settings.tsx"),
    route("people", "routes/console.people.tsx"),
    route("ledger", "routes/console.ledger.tsx"),
  ]),
] satisfies RouteConfig;
