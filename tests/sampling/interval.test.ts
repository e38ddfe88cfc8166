import jStat from "jstat";
import { describe, expect, it } from "vitest";
import { EMPTY_SUM, addRecord } from "~/sampling/estimate";
import { ROUGH_BELOW, Z95, toInterval } from "~/sampling/interval";

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
    expect(iv.ci95[0]).toBe(5000);
    const small = toInterval({ estimate: 10, variance: 400, certain: 0, kept: 1, uncertain: 1, maxTerm: 0 });
    expect(small.ci95[0]).toBe(0);
  });

  it(`flags rough when fewer than ${ROUGH_BELOW} uncertain kept records contribute`, () => {
    expect(toInterval({ estimate: 1, variance: 1, certain: 0, kept: 50, uncertain: ROUGH_BELOW - 1, maxTerm: 0 }).rough).toBe(true);
    expect(toInterval({ estimate: 1, variance: 1, certain: 0, kept: 50, uncertain: ROUGH_BELOW, maxTerm: 0 }).rough).toBe(false);
  });
});
