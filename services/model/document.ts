/**
 * The site-model document as it stands after schema validation (defaults filled in).
 * Mirrors schemas/site-model.schema.json field for field; replace with the generated type once
 * scripts/gen-types.ts emits one (the schema stays the truth).
 */

/** `check` (default) verifies dimensional consistency; `ignore` skips it for one expression. */
export type UnitsCheck = "check" | "ignore";

export interface TagDocument {
  id: string;
  description?: string;
  variable: string;
  unit: string;
  sigma: number;
  range: { min: number; max: number };
  maxRatePerS?: number;
  frozenAfterS?: number;
  staleAfterS?: number;
  key?: boolean;
  source?: { topic?: string; name: string; unit?: string; scale?: number; offset?: number };
}

export interface DecisionDocument {
  symbol: string;
  description?: string;
  unit: string;
  setpointTag: string;
  min?: number;
  max?: number;
  initial?: number;
  maxMovePerCycle?: number;
  rampPerS?: number;
  deadband?: number;
}

export interface ParameterDocument {
  symbol: string;
  description?: string;
  unit: string;
  initial: number;
  min: number;
  max: number;
  maxChangePerCycle?: number;
}

export interface DisturbanceDocument {
  symbol: string;
  description?: string;
  unit: string;
  tag?: string;
  default?: number;
}

export interface PriceDocument {
  symbol: string;
  description?: string;
  unit: string;
  default: number;
}

export interface ConstantDocument {
  symbol: string;
  description?: string;
  unit: string;
  value: number;
}

export interface BalanceDocument {
  name: string;
  description?: string;
  terms: { tag: string; times?: string; coeff: number }[];
}

export interface UnknownDocument {
  symbol: string;
  description?: string;
  unit: string;
  initial: number;
  min?: number;
  max?: number;
  scale?: number;
}

export interface EquationDocument {
  name: string;
  description?: string;
  expression: string;
  unit?: string;
  units?: UnitsCheck;
}

export interface OutputDocument {
  symbol: string;
  description?: string;
  unit: string;
  expression: string;
  units?: UnitsCheck;
}

export interface ConstraintDocument {
  name: string;
  description?: string;
  expression: string;
  kind: "hard" | "soft";
  penalty?: number;
  units?: UnitsCheck;
}

/** Steady-state detection policy (Cao & Rhinehart 1995 filter weights and the plant-wide verdict). */
export interface SteadyStatePolicy {
  lambda1: number;
  lambda2: number;
  lambda3: number;
  rCritical: number;
  keyTagFraction: number;
  minSteadyS: number;
  settleTimeS: number;
  sampleIntervalS: number;
}

/** Setpoint validation policy. */
export interface ValidationPolicy {
  minImprovement: number;
  maxDataAgeS: number;
  maxFitChiSquareRatio: number;
  requireApproval: boolean;
  commandExpiryS: number;
}

export interface SiteModelDocument {
  $schema?: string;
  formatVersion?: 1;
  site: { id: string; name: string; description?: string };
  constants?: ConstantDocument[];
  tags?: TagDocument[];
  decisions?: DecisionDocument[];
  parameters?: ParameterDocument[];
  disturbances?: DisturbanceDocument[];
  prices?: PriceDocument[];
  balances?: BalanceDocument[];
  model: { unknowns: UnknownDocument[]; equations: EquationDocument[]; outputs?: OutputDocument[] };
  objective: {
    sense: "max" | "min";
    expression: string;
    unit: string;
    units?: UnitsCheck;
    description?: string;
  };
  constraints?: ConstraintDocument[];
  steadyState?: Partial<SteadyStatePolicy>;
  validation?: Partial<ValidationPolicy>;
}

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
