/**
 * The site-model document as it stands after schema validation. The types are generated from
 * schemas/site-model.schema.json (services/model/generated/site-model.ts), so the schema stays the
 * one source of truth; this file only gives them the names the model code uses, and the defaults.
 */
import type * as G from "./generated/site-model.js";

export type UnitsCheck = G.UnitsCheck;
export type SiteModelDocument = G.SiteModelDocument;
export type TagDocument = G.TagDocument;
export type DecisionDocument = G.DecisionDocument;
export type ParameterDocument = G.ParameterDocument;
export type DisturbanceDocument = G.DisturbanceDocument;
export type PriceDocument = G.PriceDocument;
export type ConstantDocument = NonNullable<G.SiteModelDocument["constants"]>[number];
export type BalanceDocument = G.BalanceDocument;
export type UnknownDocument = G.UnknownDocument;
export type EquationDocument = G.EquationDocument;
export type OutputDocument = G.OutputDocument;
export type ConstraintDocument = G.ConstraintDocument;
/** Steady-state detection policy with its defaults filled in. */
export type SteadyStatePolicy = Required<G.SteadyStatePolicyDocument>;
/** Setpoint validation policy with its defaults filled in. */
export type ValidationPolicy = Required<G.ValidationPolicyDocument>;

/** Defaults of the policy blocks (also written in the schema as `default`). */
export const STEADY_STATE_DEFAULTS: Readonly<SteadyStatePolicy> = Object.freeze({
  // Cao & Rhinehart (1995) recommended filter weights; 1.44 is the 95 % R under white noise for them.
  lambda1: 0.2,
  lambda2: 0.1,
  lambda3: 0.1,
  rCritical: 1.44,
  keyTagFraction: 1,
  minSteadyS: 300,
  settleTimeS: 900,
  sampleIntervalS: 10,
});

/** Defaults of the validation policy. */
export const VALIDATION_DEFAULTS: Readonly<ValidationPolicy> = Object.freeze({
  minImprovement: 0,
  maxDataAgeS: 1800,
  maxFitChiSquareRatio: 3,
  requireApproval: true,
  commandExpiryS: 120,
});
