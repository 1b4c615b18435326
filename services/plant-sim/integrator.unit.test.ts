import { describe, expect, test } from "vitest";
import { createDopri5, type OdeRhs } from "./integrator.js";

const decay: OdeRhs = (_t, y, d) => {
  d[0] = -(y[0] as number);
};

/** Fixed-step run: tolerances so loose that every step is accepted, the step pinned by maxStep. */
function fixedStepError(h: number): number {
  const rk = createDopri5(1, { rtol: 1e12, atol: 1e12, maxStep: h });
  const y = Float64Array.of(1);
  rk.integrate(decay, 0, y, 1, h);
  return Math.abs((y[0] as number) - Math.exp(-1));
}

describe("Dormand–Prince 5(4) integrator", () => {
  test("integrates y' = −y from 0 to 10 to within the requested tolerance", () => {
    // given a scalar decay with exact solution e^(−t)
    const rk = createDopri5(1, { rtol: 1e-10, atol: 1e-12 });
    const y = Float64Array.of(1);
    // when it integrates to t = 10
    const r = rk.integrate(decay, 0, y, 10);
    // then it lands on t = 10 and the global error is near the tolerance scale
    // Source: exact solution y(t) = e^(−t) (analytic, no source needed beyond calculus).
    expect(r.reason).toBe("done");
    expect(r.t).toBe(10);
    expect(Math.abs((y[0] as number) - Math.exp(-10)) / Math.exp(-10)).toBeLessThan(1e-8);
  });

  test("is of fifth order: halving a fixed step divides the error by about 2^5", () => {
    // given fixed steps h and h/2 on y' = −y over [0, 1]
    const e1 = fixedStepError(0.1);
    const e2 = fixedStepError(0.05);
    // then the observed order log2(e1/e2) is 5 within a tenth
    // Source: Dormand & Prince (1980), J. Comp. Appl. Math. 6(1):19–26 — the propagated solution is of order 5 (published).
    const order = Math.log2(e1 / e2);
    expect(order).toBeGreaterThan(4.8);
    expect(order).toBeLessThan(5.3);
  });

  test("follows a stiff-ish linear system (eigenvalues −1 and −1000) to its exact solution", () => {
    // given y' = A y with A = [[−500.5, 499.5], [499.5, −500.5]], y(0) = (2, 0):
    // y1 = e^(−t) + e^(−1000 t), y2 = e^(−t) − e^(−1000 t)
    const f: OdeRhs = (_t, y, d) => {
      const a = y[0] as number;
      const b = y[1] as number;
      d[0] = -500.5 * a + 499.5 * b;
      d[1] = 499.5 * a - 500.5 * b;
    };
    const rk = createDopri5(2, { rtol: 1e-8, atol: 1e-10 });
    const y = Float64Array.of(2, 0);
    // when integrated to t = 5
    const r = rk.integrate(f, 0, y, 5);
    // then it matches the eigen-decomposition solution
    // Source: exact solution by eigen-decomposition of A (analytic).
    const slow = Math.exp(-5);
    expect(r.reason).toBe("done");
    expect(Math.abs((y[0] as number) - slow)).toBeLessThan(1e-8);
    expect(Math.abs((y[1] as number) - slow)).toBeLessThan(1e-8);
    // and, being explicit, its step is held near the stability limit |hλ| ≈ 3.3 once the fast mode has died
    // Source: Hairer & Wanner (1996), Solving ODEs II, §IV.2 — stability region of DOPRI5 reaches about −3.3 on the real axis (from memory).
    expect(r.steps).toBeGreaterThan(5 / (3.4 / 1000));
    expect(r.steps).toBeLessThan(5 / (1.5 / 1000));
  });

  test("integrates the logistic equation to its closed form", () => {
    // given y' = y (1 − y), y(0) = 0.1: y(t) = 1 / (1 + 9 e^(−t))
    const f: OdeRhs = (_t, y, d) => {
      const v = y[0] as number;
      d[0] = v * (1 - v);
    };
    const rk = createDopri5(1, { rtol: 1e-9, atol: 1e-12 });
    const y = Float64Array.of(0.1);
    rk.integrate(f, 0, y, 8);
    // Source: closed-form solution of the logistic equation (analytic).
    expect(Math.abs((y[0] as number) - 1 / (1 + 9 * Math.exp(-8)))).toBeLessThan(1e-9);
  });

  test("continues with the proposed step so a second interval needs no restart", () => {
    // given y' = −y integrated over [0, 1] and then [1, 2] with hNext passed on
    const rk = createDopri5(1, { rtol: 1e-8, atol: 1e-12 });
    const y = Float64Array.of(1);
    const a = rk.integrate(decay, 0, y, 1);
    const b = rk.integrate(decay, 1, y, 2, a.hNext);
    // then the result is e^(−2) and the second leg needs no more steps than the first
    expect(Math.abs((y[0] as number) - Math.exp(-2))).toBeLessThan(1e-9);
    expect(b.steps).toBeLessThanOrEqual(a.steps);
  });

  test("stops with a reason instead of looping when the derivative is not finite", () => {
    // given a right-hand side that returns NaN
    const rk = createDopri5(1);
    const y = Float64Array.of(1);
    const r = rk.integrate((_t, _y, d) => void d.fill(Number.NaN), 0, y, 1);
    // then it reports non-finite and leaves y alone
    expect(r.reason).toBe("non-finite");
    expect(y[0]).toBe(1);
  });

  test("gives up with step-too-small on a solution that blows up in finite time", () => {
    // given y' = y², y(0) = 1, which is infinite at t = 1
    const rk = createDopri5(1, { rtol: 1e-8, atol: 1e-10 });
    const y = Float64Array.of(1);
    const r = rk.integrate(
      (_t, v, d) => {
        d[0] = (v[0] as number) ** 2;
      },
      0,
      y,
      2,
    );
    // then it stops at the singularity (to within the step floor) with a reason, not past it
    expect(["step-too-small", "max-steps", "non-finite"]).toContain(r.reason);
    expect(r.t).toBeLessThan(1 + 1e-6);
  });
});
