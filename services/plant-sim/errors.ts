/**
 * Typed errors for the demo plant simulator. Callers branch on `code`, never on message text.
 * A retired code is never reused; `PLANT_SIM_ERROR_CODES` is the registry.
 */
import { SteadfastError } from "../kit/errors.js";

/** Registry of the plant simulator's error codes, with the one-line meaning shown in the docs. */
export const PLANT_SIM_ERROR_CODES = {
  PLANT_SIM_CONFIG_INVALID:
    "the plant-sim configuration does not fit the site model (unknown symbol, missing state form, bad sign)",
  PLANT_SIM_INTEGRATION_FAILED:
    "the ODE integrator could not advance (step size underflow, step limit, or a non-finite derivative)",
  PLANT_SIM_STEADY_STATE_FAILED:
    "the plant's steady-state equations did not solve at start or for a lag target",
  PLANT_SIM_SETPOINT_UNKNOWN: "a setpoint names a decision or setpoint tag the plant does not have",
} as const;

export type PlantSimErrorCode = keyof typeof PLANT_SIM_ERROR_CODES;

/** An error raised by the plant simulator (services/plant-sim). */
export class PlantSimError extends SteadfastError {
  override readonly name = "PlantSimError";
  constructor(
    readonly code: PlantSimErrorCode,
    message: string,
    options?: ErrorOptions,
  ) {
    super(message, options);
  }
}
