import jStat from "jstat";
import { describe, expect, it } from "vitest";
import { EMPTY_SUM, addRecord } from "~/sampling/estimate";
import { ROUGH_BELOW, Z95, gammaInterval, roughReason, toInterval } from "~/sampling/interval";

describe("the 95% normal quantile", () => {
  it("equals Φ⁻¹(0.975) from the jstat reference library (npm jstat)", () => {
    expect(Z95).toBeCloseTo(jStat.normal.inv(0.975, 0, 1), 9);
    expect(jStat.normal.cdf(Z95, 0, 1)).toBeCloseTo(0.975, 12);
  });

  it("agrees with the NIST/SEMATECH e-Handbook §1.3.6.7.1 normal table: area 0 to 1.96 is 0.47500 (table value recalled from memory)", () => {
    expect(Z95.toFixed(2)).toBe("1.96");
    expect((jStat.normal.cdf(1.96, 0, 1) - 0.5).toFixed(5)).toBe("0.47500");
  });
});

describe("toInterval", () => {
  it("is estimate ± z·√variance (normal approximation)", () => {
    const iv = toInterval({ estimate: 1000, variance: 2500, certain: 0, kept: 40, uncertain: 40, maxTerm: 0 });
    expect(iv.stdError).toBe(50);
    expect(iv.ci95[0]).toBeCloseTo(1000 - Z95 * 50, 9);
    expect(iv.ci95[1]).toBeCloseTo(1000 + Z95 * 50, 9);
    expect(iv.rough).toBe(false);
  });

  it("never puts the lower bound below the certain part (records with w ≥ τ are known exactly: DLT 2007 §1) nor below 0", () => {
    const sum = { ...EMPTY_SUM };
    addRecord(sum, 100, 5000, 5000); // certain: w ≥ τ
    addRecord(sum, 100, 1, 1); // ŵ = τ = 100, v̂ = τ(τ − w) = 9900
    expect(sum.estimate).toBe(5100);
    expect(sum.variance).toBe(9900);
    const iv = toInterval(sum);
    expect(iv.ci95[0]).toBeGreaterThanOrEqual(5000);
    const normal = toInterval({ estimate: 10, variance: 400, certain: 0, kept: 40, uncertain: 40, maxTerm: 1 });
    expect(normal.ci95[0]).toBe(0);
  });

  it(`flags rough when fewer than ${ROUGH_BELOW} uncertain kept records contribute`, () => {
    expect(toInterval({ estimate: 1, variance: 1, certain: 0, kept: 50, uncertain: ROUGH_BELOW - 1, maxTerm: 0 }).rough).toBe(true);
    expect(toInterval({ estimate: 1, variance: 1, certain: 0, kept: 50, uncertain: ROUGH_BELOW, maxTerm: 0 }).rough).toBe(false);
  });
});

describe("toInterval for small subsets (issue 10)", () => {
  it("gives Garwood's exact Poisson interval times τ when every uncertain term is τ and the Poisson variance applies (Fay and Feuer 1997, §2: equal weights reduce to Garwood 1936)", () => {
    // 3 events: Garwood's 95% limits [0.619, 8.767] (CRC Handbook of Tables for Probability and
    // Statistics, Poisson confidence limits; recalled from memory, and checked against jstat).
    const [low, high] = gammaInterval(3, 3, 1);
    expect(low).toBeCloseTo(jStat.gamma.inv(0.025, 3, 1), 10);
    expect(high).toBeCloseTo(jStat.gamma.inv(0.975, 4, 1), 10);
    expect(low).toBeCloseTo(0.619, 3);
    expect(high).toBeCloseTo(8.767, 3);
  });

  it("answers no-match with [0, 3.689·unseenTerm] (Garwood's upper limit for a count of 0), never [0, 0], while τ > 0", () => {
    const iv = toInterval(EMPTY_SUM, { unseenTerm: 1000 });
    expect(iv.method).toBe("no-match");
    expect(iv.matched).toBe(false);
    expect(iv.ci95[0]).toBe(0);
    expect(iv.ci95[1]).toBeCloseTo(1000 * jStat.gamma.inv(0.975, 1, 1), 6);
    expect(iv.ci95[1]).toBeCloseTo(3688.879, 2);
    expect(iv.rough).toBe(true);
  });

  it("never puts the upper bound above the range's exact total (cap)", () => {
    expect(toInterval(EMPTY_SUM, { unseenTerm: 1000, cap: 500 }).ci95).toEqual([0, 500]);
  });

  it("is exact only when nothing is uncertain and no record was left out (τ = 0)", () => {
    const sum = addRecord({ ...EMPTY_SUM }, 0, 300, 300);
    expect(toInterval(sum, { unseenTerm: 0 })).toMatchObject({ method: "exact", ci95: [300, 300], rough: false });
    // Only certain records matched but τ > 0: records left out may still belong to the subset.
    const certainOnly = toInterval(addRecord({ ...EMPTY_SUM }, 100, 300, 300), { unseenTerm: 100 });
    expect(certainOnly.method).toBe("gamma");
    expect(certainOnly.ci95[0]).toBe(300);
    expect(certainOnly.ci95[1]).toBeCloseTo(300 + 100 * -Math.log(0.025), 6);
  });

  it("says why it is rough: few uncertain terms, or one term dominating the variance", () => {
    const few = toInterval({ estimate: 300, variance: 30000, certain: 0, kept: 3, uncertain: 3, maxTerm: 100 }, { unseenTerm: 100 });
    expect(few).toMatchObject({ method: "gamma", rough: true, roughReason: "the normal approximation would be poor: 3 uncertain terms" });
    const skewed = toInterval({ estimate: 5000, variance: 1_000_000, certain: 0, kept: 100, uncertain: 100, maxTerm: 620 }, { unseenTerm: 620 });
    expect(skewed.roughReason).toBe("one record carries 38% of the variance");
    expect(roughReason({ estimate: 5000, variance: 1_000_000, certain: 0, kept: 100, uncertain: 100, maxTerm: 100 })).toBeNull();
  });
});
