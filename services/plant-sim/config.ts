/**
 * plant-sim's configuration: the shared service options plus `plantSim`, validated once at start
 * (loadConfig) and frozen. Times: `…S` in simulated seconds unless said "wall".
 */

import type { Secret } from "../kit/command-signing.js";
import { type BaseConfig, serviceConfigSchema } from "../kit/config.js";
import type { StateForm } from "./dynamics.js";
import type { FaultSpec } from "./faults.js";
import type { DisturbanceSpec, DriftSpec, TripSpec } from "./plant.js";
import type { LoopSpec } from "./regulatory.js";
import type { SimulatorOptions } from "./sim.js";

const num = (description: string, extra: Record<string, unknown> = {}) => ({
  type: "number",
  description,
  ...extra,
});
const symbol = { type: "string", pattern: "^[A-Za-z_][A-Za-z0-9_]*$", maxLength: 64 };

const loopSchema = {
  type: "object",
  additionalProperties: false,
  properties: {
    mode: { enum: ["first-order", "pi"], description: "Loop response model. Default first-order." },
    closedLoopTauS: num("Closed-loop time constant, s. Default 60.", { exclusiveMinimum: 0 }),
    rampPerS: num("Setpoint ramp limit, decision unit/s. Default: the decision's rampPerS.", {
      exclusiveMinimum: 0,
    }),
    processGain: num("pi: process gain. Default 1."),
    processTauS: num("pi: process time constant, s. Default 3 × closedLoopTauS.", { exclusiveMinimum: 0 }),
    kc: num("pi: controller gain. Default SIMC.", { exclusiveMinimum: 0 }),
    tiS: num("pi: integral time, s. Default SIMC.", { exclusiveMinimum: 0 }),
    outMin: num("pi: controller output low limit."),
    outMax: num("pi: controller output high limit."),
  },
};

const faultSchema = {
  type: "object",
  additionalProperties: false,
  required: ["kind", "startS"],
  properties: {
    kind: { enum: ["stuck", "spike", "drift", "bias", "dropout", "noise-burst", "lost-connection"] },
    tag: { type: "string", maxLength: 64 },
    startS: num("Start, simulated s since plant start.", { minimum: 0 }),
    durationS: num("Length, simulated s; absent = for ever.", { exclusiveMinimum: 0 }),
    magnitude: num("spike/bias offset, tag unit."),
    ratePerS: num("drift rate, tag unit per simulated s."),
    factor: num("noise-burst sigma multiplier (> 1).", { exclusiveMinimum: 1 }),
  },
};

/** JSON Schema of plant-sim's own section. */
export const plantSimSection = {
  type: "object",
  additionalProperties: false,
  required: ["plantModel", "states", "gateway"],
  properties: {
    plantModel: {
      type: "string",
      minLength: 1,
      description: "Path of the plant's site-model YAML (the 'true' plant).",
    },
    unit: {
      type: "string",
      pattern: "^[A-Za-z0-9][A-Za-z0-9_.-]*$",
      maxLength: 40,
      default: "R-1",
      description: "Process unit id commands are addressed to. Default R-1.",
    },
    timeScale: num("Simulated seconds per wall second. Default 60.", {
      exclusiveMinimum: 0,
      maximum: 1e6,
      default: 60,
    }),
    periodS: num("Simulated seconds between measurement batches. Default 10.", {
      exclusiveMinimum: 0,
      default: 10,
    }),
    tickMs: num("Wall milliseconds between simulation ticks. Default 100.", {
      minimum: 5,
      maximum: 60000,
      default: 100,
    }),
    maxCatchUpS: num(
      "Most simulated seconds run in one tick (the sim lags rather than stalls when slower than timeScale). Default 3600.",
      {
        exclusiveMinimum: 0,
        default: 3600,
      },
    ),
    source: {
      type: "string",
      pattern: "^[a-z0-9-]+$",
      maxLength: 40,
      default: "sim",
      description: "Batches go to rto.<site>.raw.<source>. Default sim.",
    },
    timestamps: {
      enum: ["simulated", "clock"],
      default: "simulated",
      description:
        "Batch times: 'simulated' = start time + simulated seconds (runs timeScale× faster than the clock); 'clock' = the service clock. Default simulated.",
    },
    statusPeriodS: num("Wall seconds between status readbacks. Default 10.", {
      exclusiveMinimum: 0,
      default: 10,
    }),
    seed: {
      type: "integer",
      minimum: 0,
      default: 1,
      description: "Seed of disturbance and measurement noise. Default 1.",
    },
    noiseScale: num("Multiplies every tag sigma (0: noise-free). Default 1.", { minimum: 0, default: 1 }),
    holdS: num("Longest first-order-hold interval of the decisions, s. Default 10.", {
      exclusiveMinimum: 0,
      default: 10,
    }),
    rtol: num("Integrator relative tolerance. Default 1e-7.", {
      exclusiveMinimum: 0,
      maximum: 0.1,
      default: 1e-7,
    }),
    initialDecisions: {
      type: "object",
      additionalProperties: { type: "number" },
      description: "Start decisions by symbol.",
    },
    states: {
      type: "array",
      minItems: 1,
      maxItems: 500,
      description: "One dynamic form per model unknown (see dynamics.ts).",
      items: {
        oneOf: [
          {
            type: "object",
            additionalProperties: false,
            required: ["unknown", "form", "equation", "capacity"],
            properties: {
              unknown: symbol,
              form: { const: "capacity" },
              equation: { type: "string", maxLength: 80 },
              capacity: num("Holdup: equation unit · s / unknown unit.", { exclusiveMinimum: 0 }),
              sign: { enum: [1, -1] },
            },
          },
          {
            type: "object",
            additionalProperties: false,
            required: ["unknown", "form", "tauS"],
            properties: {
              unknown: symbol,
              form: { const: "lag" },
              tauS: num("Time constant, s.", { exclusiveMinimum: 0 }),
            },
          },
        ],
      },
    },
    loops: { type: "object", additionalProperties: loopSchema, description: "Loop per decision symbol." },
    drifts: {
      type: "array",
      maxItems: 100,
      items: {
        type: "object",
        additionalProperties: false,
        required: ["symbol", "kind"],
        properties: {
          symbol,
          kind: { enum: ["fouling", "linear"] },
          fraction: num("fouling: fraction lost at t → ∞.", { minimum: 0, maximum: 1 }),
          tauS: num("fouling: time constant, s.", { exclusiveMinimum: 0 }),
          ratePerS: num("linear: rate, unit/s."),
        },
      },
    },
    disturbances: {
      type: "array",
      maxItems: 100,
      items: {
        type: "object",
        additionalProperties: false,
        required: ["symbol"],
        properties: {
          symbol,
          base: num("Mean, symbol unit. Default the model default."),
          amplitude: num("Daily-cycle amplitude, symbol unit. Default 0."),
          periodS: num("Cycle period, s. Default 86400.", { exclusiveMinimum: 0 }),
          phaseS: num("Phase shift, s. Default 0."),
          noiseSigma: num("Noise standard deviation, symbol unit. Default 0.", { minimum: 0 }),
          noiseTauS: num("Noise correlation time, s. Default 600.", { exclusiveMinimum: 0 }),
        },
      },
    },
    trips: {
      type: "array",
      maxItems: 20,
      items: {
        type: "object",
        additionalProperties: false,
        required: ["symbol"],
        properties: {
          symbol,
          above: { type: "number" },
          below: { type: "number" },
          safe: { type: "object", additionalProperties: { type: "number" } },
        },
      },
    },
    faults: { type: "array", maxItems: 100, items: faultSchema, default: [] },
    gateway: {
      type: "object",
      additionalProperties: false,
      required: ["keys"],
      properties: {
        keys: {
          type: "object",
          minProperties: 1,
          additionalProperties: { type: "string", minLength: 1 },
          description: "Trusted HMAC keys, id → secret (base64:…, hex:… or text; ≥ 32 bytes).",
        },
        watchdogS: num("Heartbeat watchdog, s of the service clock. Default 30.", {
          exclusiveMinimum: 0,
          default: 30,
        }),
        maxClockSkewS: num("Tolerated lead of a command's issue time, s. Default 2.", { minimum: 0 }),
        maxAgeS: num("Oldest command accepted, s. Default 60.", { exclusiveMinimum: 0 }),
        heartbeatFrom: {
          type: "string",
          pattern: "^[a-z0-9-]+$",
          default: "validate",
          description:
            "Service whose heartbeats feed the watchdog (rto.<site>.heartbeat.<service>). Default validate.",
        },
        limits: {
          type: "object",
          description:
            "Plant limits by setpoint tag, decision unit; default each decision's min, max and rampPerS.",
          additionalProperties: {
            type: "object",
            additionalProperties: false,
            required: ["min", "max"],
            properties: {
              min: { type: "number" },
              max: { type: "number" },
              maxRatePerS: { type: "number", exclusiveMinimum: 0 },
            },
          },
        },
      },
    },
    sparkplug: {
      type: "object",
      additionalProperties: false,
      default: {},
      properties: {
        enabled: {
          type: "boolean",
          default: false,
          description: "Also publish Sparkplug B NBIRTH/NDATA/NDEATH. Default false.",
        },
        url: { type: "string", description: "MQTT broker URL. Default: bus.url." },
        groupId: {
          type: "string",
          pattern: "^[A-Za-z0-9_-]+$",
          default: "steadfast",
          description: "Sparkplug group id. Default steadfast.",
        },
        edgeNodeId: {
          type: "string",
          pattern: "^[A-Za-z0-9_-]+$",
          description: "Edge node id. Default the site id.",
        },
      },
    },
  },
} as const;

/** JSON Schema of the whole plant-sim config. */
export const plantSimConfigSchema = serviceConfigSchema({ plantSim: plantSimSection }, ["plantSim"]);

/** plant-sim's own options (after defaults). */
export interface PlantSimOptions {
  plantModel: string;
  unit: string;
  timeScale: number;
  periodS: number;
  tickMs: number;
  maxCatchUpS: number;
  source: string;
  timestamps: "simulated" | "clock";
  statusPeriodS: number;
  seed: number;
  noiseScale: number;
  holdS: number;
  rtol: number;
  initialDecisions?: Record<string, number>;
  states: StateForm[];
  loops?: Record<string, LoopSpec>;
  drifts?: DriftSpec[];
  disturbances?: DisturbanceSpec[];
  trips?: TripSpec[];
  faults: FaultSpec[];
  gateway: {
    keys: Record<string, Secret>;
    watchdogS: number;
    maxClockSkewS?: number;
    maxAgeS?: number;
    heartbeatFrom: string;
    limits?: Record<string, { min: number; max: number; maxRatePerS?: number }>;
  };
  sparkplug: { enabled: boolean; url?: string; groupId: string; edgeNodeId?: string };
}

/** The whole plant-sim config. */
export interface PlantSimConfig extends BaseConfig {
  plantSim: PlantSimOptions;
}

/** The simulator options of a plant-sim config: one mapping for the service, the CLI and the tests. */
export function simulatorOptions(o: PlantSimOptions): SimulatorOptions {
  return {
    states: o.states,
    periodS: o.periodS,
    holdS: o.holdS,
    rtol: o.rtol,
    seed: o.seed,
    noiseScale: o.noiseScale,
    faults: o.faults,
    ...(o.loops ? { loops: o.loops } : {}),
    ...(o.drifts ? { drifts: o.drifts } : {}),
    ...(o.disturbances ? { disturbances: o.disturbances } : {}),
    ...(o.trips ? { trips: o.trips } : {}),
    ...(o.initialDecisions ? { initialDecisions: o.initialDecisions } : {}),
  };
}
