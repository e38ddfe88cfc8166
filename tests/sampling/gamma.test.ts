import jStat from "jstat";
import { describe, expect, it } from "vitest";
import { gammaP, gammaQ, gammaQuantile, lnGamma } from "~/sampling/gamma";

const SHAPES = [1e-3, 0.01, 0.1, 0.5, 1, 2.5, 10, 37.5, 100, 1e3, 1e4, 1e5, 1e6, 1e7];
const PROBABILITIES = [1e-6, 0.001, 0.025, 0.3, 0.5, 0.7, 0.975, 0.999, 1 - 1e-6];

function relative(a: number, b: number): number {
  return Math.abs(a - b) / Math.max(Math.abs(a), Math.abs(b), 1e-300);
}

describe("lnGamma", () => {
  it("matches ln((n−1)!) at integers and ln √π at ½ (Abramowitz and Stegun 6.1.6, 6.1.8)", () => {
    let factorial = 1;
    for (let n = 1; n <= 20; n++) {
      expect(relative(lnGamma(n), Math.log(factorial))).toBeLessThan(1e-13);
      factorial *= n;
    }
    expect(lnGamma(0.5)).toBeCloseTo(0.5 * Math.log(Math.PI), 14);
  });

  it("agrees with jstat.gammaln (npm jstat) over 1e-3 … 1e7", () => {
    for (const a of SHAPES) expect(Math.abs(lnGamma(a) - jStat.gammaln(a))).toBeLessThan(1e-9 * Math.max(1, Math.abs(lnGamma(a))));
  });
});

describe("the regularized incomplete gamma P(a, x), Q(a, x)", () => {
  it("is 1 − e^(−x) for a = 1 and erf(√x) for a = ½ (Abramowitz and Stegun 6.5.12 with 6.5.17: P(½, x) = erf √x)", () => {
    for (const x of [1e-8, 0.01, 0.5, 1, 3, 10, 40]) {
      expect(relative(gammaP(1, x), -Math.expm1(-x))).toBeLessThan(1e-13);
      expect(relative(gammaQ(1, x), Math.exp(-x))).toBeLessThan(1e-13);
    }
    // erf(1) = 0.8427007929497149 (A&S Table 7.1, to 15 digits there; value recalled from memory and checked against jstat below).
    expect(relative(gammaP(0.5, 1), 0.8427007929497149)).toBeLessThan(1e-14);
    expect(relative(gammaP(0.5, 1), jStat.lowRegGamma(0.5, 1))).toBeLessThan(1e-12);
  });

  it("is the Poisson tail: Q(n, x) = Σ_{j<n} e^(−x) x^j / j! for integer n (Abramowitz and Stegun 6.5.13 / 26.4.21)", () => {
    for (const n of [1, 2, 5, 20, 60]) {
      for (const x of [0.3, 5, 20, 55]) {
        let term = Math.exp(-x);
        let sum = 0;
        for (let j = 0; j < n; j++) {
          sum += term;
          term *= x / (j + 1);
        }
        expect(relative(gammaQ(n, x), sum)).toBeLessThan(1e-12);
      }
    }
  });

  // jstat forms exp(a·ln x − x − lnΓ(a)) directly, which loses about log10(a·ln a) digits to
  // cancellation: 1e-10 holds up to a = 1e4, above it jstat itself is good to ~1e-8 only.
  it("agrees with jstat.lowRegGamma (npm jstat): 1e-10 up to shape 1e4, 5e-8 above (jstat's own cancellation)", () => {
    for (const a of SHAPES) {
      for (const f of [0.5, 0.9, 1, 1.1, 2]) {
        const x = a * f + (f - 1) * 3 * Math.sqrt(a); // around the bulk, where P is neither 0 nor 1
        if (x <= 0) continue;
        expect(Math.abs(gammaP(a, x) - jStat.lowRegGamma(a, x))).toBeLessThan(a <= 1e4 ? 1e-10 : 5e-8);
      }
    }
  });

  it("keeps P + Q = 1 to rounding", () => {
    for (const a of SHAPES) for (const x of [a / 2, a, 2 * a + 1]) expect(Math.abs(gammaP(a, x) + gammaQ(a, x) - 1)).toBeLessThan(1e-14);
  });
});

describe("gammaQuantile", () => {
  it("inverts P to 1e-10 relative over shapes 1e-3 … 1e7 (round trip, in the smaller tail)", () => {
    for (const a of SHAPES) {
      for (const p of PROBABILITIES) {
        const x = gammaQuantile(a, p);
        if (x === 0) continue; // below the smallest double: (p·Γ(a+1))^(1/a) underflows for tiny a
        const tail = p < 0.5 ? gammaP(a, x) : gammaQ(a, x);
        expect(relative(tail, p < 0.5 ? p : 1 - p)).toBeLessThan(1e-10);
      }
    }
  });

  it("agrees with jstat.gamma.inv (npm jstat) to 1e-10 relative over shapes 1e-3 … 1e7", () => {
    for (const a of SHAPES) {
      for (const p of [0.001, 0.025, 0.5, 0.975, 0.999]) {
        const x = gammaQuantile(a, p);
        if (x === 0) continue;
        expect(relative(x, jStat.gamma.inv(p, a, 1))).toBeLessThan(1e-10);
      }
    }
  });

  it("gives Garwood's exact Poisson limits (Biometrika 28, 1936): lower G⁻¹(0.025; n), upper G⁻¹(0.975; n + 1)", () => {
    // Closed forms for n = 0 and n = 1: the upper limit for 0 events is −ln 0.025, the lower for 1 is −ln 0.975.
    expect(gammaQuantile(1, 0.975)).toBeCloseTo(-Math.log(0.025), 13);
    expect(gammaQuantile(1, 0.025)).toBeCloseTo(-Math.log(0.975), 13);
    // 95% Poisson limits as tabulated in the CRC Handbook of Tables for Probability and Statistics
    // (W. H. Beyer, ed., 2nd ed., 1968, "Confidence limits for the expected value of a Poisson
    // variable"), to the table's 3–4 digits. Values recalled from memory: each is also checked
    // against jstat.gamma.inv here.
    const table: [n: number, low: number, high: number][] = [
      [0, 0, 3.689],
      [1, 0.0253, 5.572],
      [2, 0.242, 7.225],
      [5, 1.623, 11.668],
      [10, 4.795, 18.39],
    ];
    for (const [n, low, high] of table) {
      const ours: [number, number] = [n === 0 ? 0 : gammaQuantile(n, 0.025), gammaQuantile(n + 1, 0.975)];
      expect(ours[0]).toBeCloseTo(low, 3);
      expect(ours[1]).toBeCloseTo(high, 2);
      if (n > 0) expect(relative(ours[0], jStat.gamma.inv(0.025, n, 1))).toBeLessThan(1e-10);
      expect(relative(ours[1], jStat.gamma.inv(0.975, n + 1, 1))).toBeLessThan(1e-10);
    }
  });

  it("answers NaN for a shape ≤ 0 or p outside [0, 1] instead of throwing", () => {
    expect(gammaQuantile(0, 0.5)).toBeNaN();
    expect(gammaQuantile(1, 1.5)).toBeNaN();
    expect(gammaP(-1, 1)).toBeNaN();
  });
});
