import { type RouteConfig, index, route } from "@react-router/dev/routes";

export default [
  index("routes/home.tsx"),
  route("healthz", "routes/healthz.ts"),
  route("api/v1/flows", "routes/api.v1.flows.ts"),
  route("api/v1/estimate", "routes/api.v1.estimate.ts"),
] satisfies RouteConfig;
