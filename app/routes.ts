import { type RouteConfig, index, layout, prefix, route } from "@react-router/dev/routes";

export default [
  index("routes/home.tsx"),
  route("healthz", "routes/healthz.ts"),
  route("api/v1/flows", "routes/api.v1.flows.ts"),
  route("api/v1/estimate", "routes/api.v1.estimate.ts"),

  route("signin", "routes/signin.tsx"),
  route("signout", "routes/signout.ts"),
  route("auth/github", "routes/auth.github.ts"),
  route("auth/github/callback", "routes/auth.github.callback.ts"),
  route("console", "routes/console.index.tsx"),

  // The console of one tenant; every child checks membership and role again on the server.
  route("t/:tenant", "routes/console.tsx", [index("routes/console.tenant-index.ts")]),
] satisfies RouteConfig;
