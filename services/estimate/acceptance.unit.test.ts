import { describe, expect, test } from "vitest";
import { type AcceptanceInput, checkAcceptance } from "./acceptance.js";

/** A healthy fit: 2 parameters, 10 dof, χ² well under its 99 % quantile (23.209). */
const good: AcceptanceInput = {
  p: [2.0, 0.5],
  weightedRss: 9.0,
  dof: 10,
  ciHalfWidth: [0.1, 0.05],
  converged: true,
};

describe("checkAcceptance", () => {
  test("accepts a converged fit that passes every rule", () => {
    const verdict = checkAcceptance(good, {
      parameters: [
        { lower: 0, upper: 10 },
        { lower: 0, upper: 1 },
      ],
    });
    expect(verdict).toEqual({ accepted: true, reasons: [] });
  });

  test("rejects a fit whose chi-square exceeds the 99 % quantile for its dof", () => {
    // Source: NIST/SEMATECH e-Handbook §1.3.6.7.4: χ²(0.99, 10) = 23.209 (published)
    const verdict = checkAcceptance({ ...good, weightedRss: 23.3 });
    expect(verdict.accepted).toBe(false);
    expect(verdict.reasons.map((r) => r.code)).toEqual(["ACCEPT_CHI_SQUARE"]);
    // and accepts just under it
    expect(checkAcceptance({ ...good, weightedRss: 23.2 }).accepted).toBe(true);
  });

  test("uses the configured confidence for the fit gate", () => {
    // Source: NIST/SEMATECH e-Handbook §1.3.6.7.4: χ²(0.95, 10) = 18.307 (published)
    expect(checkAcceptance({ ...good, weightedRss: 18.4 }, { fitConfidence: 0.95 }).accepted).toBe(false);
    expect(checkAcceptance({ ...good, weightedRss: 18.2 }, { fitConfidence: 0.95 }).accepted).toBe(true);
  });

  test("skips the fit gate when told the weights are not true variances", () => {
    expect(checkAcceptance({ ...good, weightedRss: 1e6 }, { checkFit: false }).accepted).toBe(true);
  });

  test("names the parameter that leaves its sanity limits", () => {
    const verdict = checkAcceptance(
      { ...good, p: [-1, 1.5] },
      {
        parameters: [
          { name: "uaKWPerK", lower: 0 },
          { name: "activity", upper: 1 },
        ],
      },
    );
    expect(verdict.reasons).toEqual([
      expect.objectContaining({ code: "ACCEPT_BELOW_LOWER", parameter: "uaKWPerK" }),
      expect.objectContaining({ code: "ACCEPT_ABOVE_UPPER", parameter: "activity" }),
    ]);
  });

  test("rejects a move larger than the per-cycle limit from the previous accepted value", () => {
    const rules = {
      parameters: [
        { name: "ua", maxMove: 0.5 },
        { name: "eta", maxRelativeMove: 0.1 },
      ],
    };
    const verdict = checkAcceptance({ ...good, previous: [1.4, 0.44] }, rules);
    expect(verdict.reasons.map((r) => [r.code, r.parameter])).toEqual([
      ["ACCEPT_MOVE_LIMIT", "ua"],
      ["ACCEPT_MOVE_LIMIT", "eta"],
    ]);
    expect(checkAcceptance({ ...good, previous: [1.6, 0.46] }, rules).accepted).toBe(true);
  });

  test("rejects an interval wider than the configured fraction of the value", () => {
    const verdict = checkAcceptance({ ...good, ciHalfWidth: [1.2, 0.05] }, { maxRelativeHalfWidth: 0.5 });
    expect(verdict.reasons).toEqual([
      expect.objectContaining({ code: "ACCEPT_CI_TOO_WIDE", parameter: "p0" }),
    ]);
    // a per-parameter override loosens it
    expect(
      checkAcceptance({ ...good, ciHalfWidth: [1.2, 0.05] }, { parameters: [{ maxRelativeHalfWidth: 0.7 }] })
        .accepted,
    ).toBe(true);
  });

  test("rejects a fit that did not converge, quoting the solver's reason", () => {
    const verdict = checkAcceptance({ ...good, converged: false, reason: "max-iterations" });
    expect(verdict.reasons[0]).toEqual(expect.objectContaining({ code: "ACCEPT_NOT_CONVERGED" }));
    expect(verdict.reasons[0]?.detail).toContain("max-iterations");
  });

  test("rejects non-finite values and a rank-deficient Jacobian by default, but not a mere correlation", () => {
    const verdict = checkAcceptance({
      ...good,
      ciHalfWidth: [Number.POSITIVE_INFINITY, 0.05],
      warnings: [
        { code: "STAT_RANK_DEFICIENT", parameters: [0, 1], detail: "rank 1 < 2" },
        { code: "STAT_HIGH_CORRELATION", parameters: [0, 1], detail: "corr 0.995" },
      ],
    });
    expect(verdict.reasons.map((r) => r.code)).toEqual(["ACCEPT_IDENTIFIABILITY", "ACCEPT_NOT_FINITE"]);
  });

  test("rejects a fit without degrees of freedom when the fit gate is on", () => {
    expect(checkAcceptance({ ...good, dof: 0 }).reasons.map((r) => r.code)).toEqual(["ACCEPT_NO_DOF"]);
  });
});
