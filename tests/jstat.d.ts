// Minimal typings for the parts of jstat (npm "jstat", no bundled types) the tests use.
declare module "jstat" {
  const jStat: {
    normal: { inv(p: number, mean: number, std: number): number; cdf(x: number, mean: number, std: number): number };
    gamma: { inv(p: number, shape: number, scale: number): number; cdf(x: number, shape: number, scale: number): number };
    lowRegGamma(a: number, x: number): number;
    gammaln(x: number): number;
  };
  export default jStat;
}
