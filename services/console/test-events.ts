/**
 * Event data for the console's tests (unit, int and the browser test): a two-setpoint reactor like
 * the demo site's, with invented numbers. Not used by the service itself.
 */
import type {
  CycleStatus,
  ModelUpdate,
  Proposal,
  Readback,
  SetpointCommand,
  ValidationResult,
} from "../kit/generated/messages.js";

/** A proposal moving feed B from 1.2 to 1.35 kg/s and the reactor temperature from 70 to 72 °C. */
export function proposalData(profitNowUsdPerS: number, changeUsdPerS = 0.05): Proposal {
  return {
    status: "optimal",
    formulation: "sequential",
    setpoints: [
      {
        decision: "FB",
        tag: "FI-102",
        unit: "kg/s",
        current: 1.2,
        proposed: 1.35,
        lower: 1.0,
        upper: 1.4,
        lowerFrom: "bound",
        upperFrom: "move-limit",
      },
      {
        decision: "T_R",
        tag: "TI-101",
        unit: "degC",
        current: 70,
        proposed: 72,
        lower: 68,
        upper: 72,
        lowerFrom: "move-limit",
        upperFrom: "move-limit",
      },
    ],
    objective: {
      sense: "max",
      unit: "USD/s",
      current: profitNowUsdPerS,
      proposed: profitNowUsdPerS + changeUsdPerS,
      change: changeUsdPerS,
    },
    constraints: [
      {
        name: "cooling-capacity",
        kind: "hard",
        sense: "le",
        value: 0,
        unit: "kW",
        active: true,
        shadowPrice: 0.0021,
        shadowPriceUnit: "USD/s per kW",
      },
      {
        name: "product-quality",
        kind: "hard",
        sense: "le",
        value: -0.01,
        active: false,
        shadowPrice: 0,
        shadowPriceUnit: "USD/s per 1",
      },
    ],
    active: [
      { name: "cooling-capacity", kind: "constraint", shadowPrice: 0.0021, unit: "USD/s per kW" },
      { name: "T_R ≤ 72 (move-limit)", kind: "move-limit", shadowPrice: 0.004, unit: "USD/s per degC" },
    ],
    kkt: { stationarity: 1e-7, complementarity: 0, feasibility: 0 },
    solver: { name: "sqp", status: "converged", message: "converged", iterations: 6, solveTimeMs: 12 },
    mismatch: { method: "none", updated: false, note: "no correction" },
    parameters: [{ symbol: "UA", value: 41.5, unit: "kW/K" }],
    prices: [{ symbol: "pB", value: 0.9, unit: "USD/kg" }],
  };
}

/** validate's verdict on `proposalId`: passed, waiting for an operator until `expiresAtMs`. */
export function awaitingApproval(proposalId: string, expiresAtMs: number): ValidationResult {
  return {
    proposalId,
    verdict: "pass",
    mode: "advisory",
    next: "await-approval",
    approvalExpiresAt: expiresAtMs,
    checks: [
      { name: "bounds", outcome: "pass", reason: "every setpoint within its bounds" },
      { name: "deadband", outcome: "pass", reason: "both moves exceed their deadband" },
    ],
    setpoints: [
      { decision: "FB", tag: "FI-102", unit: "kg/s", from: 1.2, target: 1.35, action: "move" },
      { decision: "T_R", tag: "TI-101", unit: "degC", from: 70, target: 72, action: "move" },
    ],
  };
}

/** A cycle event. */
export function cycleData(
  status: CycleStatus["status"],
  stage?: CycleStatus["stage"],
  outcome?: string,
  reasons?: CycleStatus["reasons"],
): CycleStatus {
  const d: CycleStatus = { status };
  if (stage) d.stage = stage;
  if (outcome) d.outcome = outcome;
  if (reasons) d.reasons = reasons;
  return d;
}

/** An estimate of UA (kW/K) with its 95 % interval, accepted or rejected. */
export function modelData(
  uaKwPerK: number,
  halfWidth: number,
  accepted: boolean,
  endMs: number,
): ModelUpdate {
  return {
    status: accepted ? "accepted" : "rejected",
    accepted,
    window: { snapshots: 1, reconciledIds: ["r1"], startMs: endMs - 60_000, endMs },
    parameters: [
      {
        symbol: "UA",
        unit: "kW/K",
        fitted: true,
        value: uaKwPerK,
        sd: halfWidth / 1.96,
        ciLower: uaKwPerK - halfWidth,
        ciUpper: uaKwPerK + halfWidth,
        previous: 42,
        inForce: accepted ? uaKwPerK : 42,
        accepted,
        atBound: false,
        reasons: accepted ? [] : [{ code: "ESTIMATE_CI_WIDE", message: "interval too wide" }],
      },
    ],
    fit: null,
    correlation: [],
    residuals: [],
    reasons: [],
    warnings: [],
  };
}

/** The signed command validate sends after an approval (the signature is a placeholder: nobody checks it here). */
export function commandData(
  site: string,
  seq: number,
  proposalId: string,
  cycleId: string,
  user: string,
  atMs: number,
): SetpointCommand {
  return {
    target: { site, unit: "R-1" },
    seq,
    issuedAt: atMs,
    expiresAt: atMs + 60_000,
    keyId: "k1",
    mode: "advisory-approved",
    proposalId,
    cycleId,
    setpoints: [
      { tag: "FI-102", value: 1.35, unit: "kg/s", rampPerS: 0.01 },
      { tag: "TI-101", value: 72, unit: "degC", rampPerS: 0.05 },
    ],
    approvedBy: { user, at: atMs },
    signature: { alg: "HMAC-SHA256", value: "0".repeat(64) },
  };
}

/** The control side's answer to command `seq`. */
export function readbackData(site: string, seq: number, proposalId: string, timeMs: number): Readback {
  return {
    trigger: "command",
    target: { site, unit: "R-1" },
    commandSeq: seq,
    proposalId,
    lastSeq: seq,
    accepted: true,
    shed: false,
    mode: "remote",
    setpoints: [
      { tag: "FI-102", unit: "kg/s", current: 1.21, target: 1.35, rampPerS: 0.01 },
      { tag: "TI-101", unit: "degC", current: 70.05, target: 72, rampPerS: 0.05 },
    ],
    time: timeMs,
  };
}
