/**
 * Dynamics for a steady-state site model. The model's equations say where the plant goes; each
 * unknown gets a way of getting there:
 *
 * - `capacity`: capacity · dx/dt = sign · residual(equation). Right where the equation is a balance
 *   "in − out + generation" (e.g. a CSTR species balance FA − F·X_A − r1 in kg/s with capacity the
 *   holdup W in kg: W·dX_A/dt = FA − F·X_A − r1). The dynamic equilibrium is then exactly the
 *   steady-state solution, and the transient is the physical one. The capacity's unit is
 *   (equation unit · s / unknown unit). `sign` (default +1) flips an equation written out − in.
 * - `lag`: dx/dt = (x_ss − x)/τ, a first-order approach to the solved steady state x_ss at the
 *   current inputs, for unknowns whose equation is not a balance (an algebraic relation, a
 *   correlation). The caller re-solves x_ss when the inputs move (`setLagTargets`).
 *
 * Pure: the point (decisions, parameters, disturbances set by the caller) comes in, derivatives go out.
 */
import type { SiteModel } from "../model/index.js";
import { PlantSimError } from "./errors.js";

/** How one unknown moves. */
export type StateForm =
  | {
      readonly unknown: string;
      readonly form: "capacity";
      /** Name of the model equation whose residual is the unknown's accumulation. */
      readonly equation: string;
      /** Capacity (holdup), equation unit · s / unknown unit, > 0. */
      readonly capacity: number;
      /** +1 when the equation reads in − out + generation (default), −1 when written the other way. */
      readonly sign?: 1 | -1;
    }
  | {
      readonly unknown: string;
      readonly form: "lag";
      /** Time constant of the approach to steady state, s, > 0. */
      readonly tauS: number;
    };

/** Right-hand side of the plant's state equations, in the model's unknown order. */
export interface Dynamics {
  /** Number of states (= model unknowns). */
  readonly n: number;
  /** Unknown symbols, in state order. */
  readonly symbols: readonly string[];
  /** True when some state is of `lag` form (the caller must keep its targets up to date). */
  readonly hasLag: boolean;
  /**
   * Writes dx/dt (unknown unit per s) into `dxdt` at states `x`; `point` holds the inputs and is
   * overwritten in its unknowns block.
   */
  rhs(point: Float64Array, x: Float64Array, dxdt: Float64Array): void;
  /** Steady-state values x_ss the `lag` states approach (all unknowns, model order). */
  setLagTargets(targets: Float64Array): void;
  /**
   * Checks that each capacity state is self-regulating at `point` (∂(sign·residual)/∂x < 0); a
   * positive slope means the sign is likely wrong. Throws PLANT_SIM_CONFIG_INVALID naming the state.
   */
  checkSigns(point: Float64Array): void;
}

/** Builds the dynamics of `model` from one form per unknown. Throws PLANT_SIM_CONFIG_INVALID on a misfit. */
export function createDynamics(model: SiteModel, forms: readonly StateForm[]): Dynamics {
  const symbols = model.unknowns.map((u) => u.symbol);
  const n = symbols.length;
  const eqIndex = new Map(model.equations.map((e, i) => [e.name, i]));
  const byUnknown = new Map<string, StateForm>();
  for (const f of forms) {
    if (!symbols.includes(f.unknown))
      throw new PlantSimError(
        "PLANT_SIM_CONFIG_INVALID",
        `state form for '${f.unknown}': not an unknown of ${model.file}`,
      );
    if (byUnknown.has(f.unknown))
      throw new PlantSimError("PLANT_SIM_CONFIG_INVALID", `unknown '${f.unknown}' has two state forms`);
    byUnknown.set(f.unknown, f);
  }
  const kind = new Uint8Array(n); // 0 capacity, 1 lag
  const eqOf = new Int32Array(n).fill(-1);
  const gain = new Float64Array(n); // sign / capacity, or 1 / τ
  const usedEq = new Set<string>();
  symbols.forEach((s, j) => {
    const f = byUnknown.get(s);
    if (!f)
      throw new PlantSimError(
        "PLANT_SIM_CONFIG_INVALID",
        `unknown '${s}' of ${model.file} has no state form: give it { form: capacity, equation, capacity } or { form: lag, tauS }`,
      );
    if (f.form === "capacity") {
      const i = eqIndex.get(f.equation);
      if (i === undefined)
        throw new PlantSimError(
          "PLANT_SIM_CONFIG_INVALID",
          `state '${s}': no equation named '${f.equation}'`,
        );
      if (usedEq.has(f.equation))
        throw new PlantSimError("PLANT_SIM_CONFIG_INVALID", `equation '${f.equation}' drives two states`);
      if (!(f.capacity > 0 && Number.isFinite(f.capacity)))
        throw new PlantSimError("PLANT_SIM_CONFIG_INVALID", `state '${s}': capacity must be finite and > 0`);
      usedEq.add(f.equation);
      kind[j] = 0;
      eqOf[j] = i;
      gain[j] = (f.sign ?? 1) / f.capacity;
    } else {
      if (!(f.tauS > 0 && Number.isFinite(f.tauS)))
        throw new PlantSimError("PLANT_SIM_CONFIG_INVALID", `state '${s}': tauS must be finite and > 0`);
      kind[j] = 1;
      gain[j] = 1 / f.tauS;
    }
  });
  const off = model.layout.blocks.unknowns.offset;
  const res = new Float64Array(model.equations.length);
  const targets = new Float64Array(n);
  const hasLag = kind.some((k) => k === 1);

  return {
    n,
    symbols,
    hasLag,
    rhs(point, x, dxdt) {
      for (let j = 0; j < n; j += 1) point[off + j] = x[j] as number;
      model.residuals(point, res);
      for (let j = 0; j < n; j += 1) {
        dxdt[j] =
          kind[j] === 0
            ? (gain[j] as number) * (res[eqOf[j] as number] as number)
            : (gain[j] as number) * ((targets[j] as number) - (x[j] as number));
      }
    },
    setLagTargets(t) {
      targets.set(t.subarray(0, n));
    },
    checkSigns(point) {
      const jac = model.jacobian(point, "unknowns");
      symbols.forEach((s, j) => {
        if (kind[j] !== 0) return;
        const slope = (gain[j] as number) * (jac[(eqOf[j] as number) * n + j] as number);
        if (slope > 0)
          throw new PlantSimError(
            "PLANT_SIM_CONFIG_INVALID",
            `state '${s}': d(sign·residual)/d${s} = ${slope.toExponential(3)} > 0 at the initial steady state, so the state would run away; is equation '${model.equations[eqOf[j] as number]?.name}' written out − in (use sign: -1)?`,
          );
      });
    },
  };
}
