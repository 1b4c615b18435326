/**
 * The point of the loop, end to end on a real broker (the suite's embedded MQTT broker, or Mosquitto
 * with LOOP_BUS=mosquitto): the demo plant holds a reaction the model lacks, so plain
 * estimate-then-optimize settles below the true plant optimum, and modifier adaptation closes the gap. Every stage runs as a service; commands are signed by
 * validate and accepted by the plant's control gateway.
 *
 * The plant's optimum is held still for the comparison: no fouling, cooling water at a constant
 * temperature, prices at the site's defaults (no market service). With a clean jacket the optimum
 * is interior (test/demo-site.unit.test.ts), so it does not depend on UA or the weather anyway.
 */
import { afterAll, describe, expect, it } from "vitest";
import { parseBusUrl } from "../cli/args.js";
import type { BusChoice, DemoConfig } from "../cli/demo.js";
import type { AnyEvent } from "../services/kit/envelope.js";
import type { SiteModel } from "../services/model/index.js";
import { type OwnBroker, startMosquitto } from "./support/brokers.js";
import { loadDemoPlant, plantInputs, plantOptimum, sequentialNlp } from "./support/demo-site.js";
import { type Loop, startLoop } from "./support/loop.js";

const TIME_SCALE = 1200;
const COOLING_WATER_C = 25;
/**
 * Seed of plant-sim's measurement noise. The comparison is repeated over seeds to size its margin
 * (LOOP_SEED=2 npm run test:loop); the default keeps the run reproducible.
 */
const NOISE_SEED = Number(process.env.LOOP_SEED ?? 1);
/**
 * The broker: the suite's embedded MQTT broker by default, or (LOOP_BUS=mosquitto) a Mosquitto of the
 * test's own on a free port, one per loop so that no retained state passes from one loop to the next.
 */
const BUS = process.env.LOOP_BUS === "mosquitto" ? "mosquitto" : "embedded";

/** Mosquitto processes this file started, stopped at the end even when the test fails. */
const brokers: OwnBroker[] = [];

async function broker(): Promise<{ choice: BusChoice; own?: OwnBroker }> {
  if (BUS === "embedded") return { choice: { kind: "embedded", host: "127.0.0.1", port: 0 } };
  const own = await startMosquitto();
  brokers.push(own);
  return { choice: { kind: "external", target: parseBusUrl(own.url) }, own };
}

function closedLoop(mismatch: "modifier" | "none") {
  return (base: Readonly<DemoConfig>): DemoConfig => ({
    ...base,
    timeScale: TIME_SCALE,
    mode: "closed-loop",
    logLevel: "warn",
    services: {
      recorder: base.services.recorder ?? {},
      ingest: {},
      steady: base.services.steady ?? {},
      reconcile: {},
      estimate: base.services.estimate ?? {},
      optimize: { optimize: { mismatch, gain: 0.5 } },
      validate: base.services.validate ?? {},
      "plant-sim": {
        ...(base.services["plant-sim"] ?? {}),
        plantSim: {
          seed: NOISE_SEED,
          drifts: [],
          disturbances: [
            { symbol: "Tcw_in", base: COOLING_WATER_C, amplitude: 0, noiseSigma: 0 },
            { symbol: "FA", noiseSigma: 0 },
          ],
        },
      },
    },
  });
}

/** The plant's true profit at the setpoints the control side holds at the end. */
function earned(plant: SiteModel, loop: Loop): { u: number[]; profit: number } {
  const readbacks = loop
    .ofType("rto.readback.v1")
    .filter((r) => r.data.setpoints && r.data.setpoints.length > 0);
  const last = readbacks.at(-1);
  const u = plant.decisions.map((d) => {
    const sp = last?.data.setpoints?.find((s) => s.tag === d.setpointTag);
    if (!sp) throw new Error(`no readback of ${d.setpointTag}`);
    return sp.target;
  });
  const conditions = { disturbances: { Tcw_in: COOLING_WATER_C } };
  return { u, profit: sequentialNlp(plant, plantInputs(plant, conditions)).evaluate(u).objective };
}

/** One line per proposal: the setpoints, whether it is an excitation move, and the modifiers. */
function trajectory(loop: Loop): string {
  const f = (x: number | undefined) => (x === undefined ? "-" : x.toFixed(3));
  return loop
    .ofType("rto.proposal.v1")
    .map((p, k) => {
      const d = p.data;
      const m = d.mismatch;
      const sp = d.setpoints.map((s) => `${s.decision} ${f(s.current)}→${f(s.proposed)}`).join(", ");
      const lam = m?.modifiers?.objectiveLambda?.map((l) => `${l.decision} ${f(l.value)}`).join(" ") ?? "";
      const exc = m?.excitation ? ` excitation(${m.excitation.step ?? "probe"})` : "";
      return `  ${k + 1}. ${d.status} ${sp}; λ ${lam}; plant ${f(m?.plantObjective)} model ${f(m?.modelObjective)}${exc}`;
    })
    .join("\n");
}

/**
 * Runs the loop until it rests: at least `commands` commands accepted by the plant, and after the last
 * of them `rest` proposals in a row that validate judged not worth a move — refused by the minimum
 * improvement or left inside the deadband, and by nothing else (a move held back by the flip-flop
 * guard waits for new gradient information; that is not rest). Measuring at a fixed count of
 * commands instead sometimes caught modifier adaptation in the middle of an excitation step, which
 * is off the optimum on purpose (seed 4: 0.53 % there, 0.06 % at rest). Returns whether it came to
 * rest within `wallMs`.
 */
async function runUntilRest(loop: Loop, commands: number, rest: number, wallMs: number): Promise<boolean> {
  const nothingWorthDoing = (v: Extract<AnyEvent, { type: "rto.validation.v1" }>) =>
    v.data.verdict !== "pass" &&
    v.data.checks.every((c) => c.outcome === "pass" || c.name === "min-improvement" || c.name === "deadband");
  const until = Date.now() + wallMs;
  while (Date.now() < until) {
    const lastAccepted = loop.events.findLastIndex(
      (e) => e.type === "rto.readback.v1" && e.data.trigger === "command" && e.data.accepted === true,
    );
    const accepted = loop
      .ofType("rto.readback.v1")
      .filter((r) => r.data.trigger === "command" && r.data.accepted).length;
    const since = loop.events
      .slice(lastAccepted + 1)
      .filter((e): e is Extract<AnyEvent, { type: "rto.validation.v1" }> => e.type === "rto.validation.v1");
    if (accepted >= commands && since.length >= rest && since.slice(-rest).every(nothingWorthDoing))
      return true;
    await new Promise((r) => setTimeout(r, 500));
  }
  return false;
}

describe("closed loop on the demo site", () => {
  const loops: Loop[] = [];
  afterAll(async () => {
    for (const l of loops) await l.stop().catch(() => undefined);
    for (const b of brokers) await b.stop().catch(() => undefined);
  });

  it("modifier adaptation reaches within 0.5 % of the true plant optimum; plain two-step stays measurably below", async () => {
    const plant = await loadDemoPlant();
    const best = plantOptimum(plant, { disturbances: { Tcw_in: COOLING_WATER_C } });

    const maBroker = await broker();
    const ma = await startLoop(closedLoop("modifier"), maBroker.choice);
    loops.push(ma);
    const maRests = await runUntilRest(ma, 4, 4, 300_000);
    const withModifiers = earned(plant, ma);
    console.log(`modifier adaptation, proposals in order:\n${trajectory(ma)}`);
    await ma.stop();
    await maBroker.own?.stop();

    const twoStepBroker = await broker();
    const twoStep = await startLoop(closedLoop("none"), twoStepBroker.choice);
    loops.push(twoStep);
    const twoStepRests = await runUntilRest(twoStep, 4, 4, 180_000);
    const plain = earned(plant, twoStep);
    await twoStep.stop();
    await twoStepBroker.own?.stop();

    const gapMa = (best.objective - withModifiers.profit) / best.objective;
    const gapTwoStep = (best.objective - plain.profit) / best.objective;
    console.log(
      `seed ${NOISE_SEED}, ${BUS}: plant optimum ${best.objective.toFixed(4)} USD/s at ${JSON.stringify(best.decisions)}; ` +
        `modifier adaptation ${withModifiers.profit.toFixed(4)} at [${withModifiers.u.map((x) => x.toFixed(3))}] (gap ${(100 * gapMa).toFixed(2)} %); ` +
        `two-step ${plain.profit.toFixed(4)} at [${plain.u.map((x) => x.toFixed(3))}] (gap ${(100 * gapTwoStep).toFixed(2)} %); ` +
        `at rest: ${maRests} / ${twoStepRests}`,
    );
    expect(gapMa).toBeLessThan(0.005);
    expect(gapTwoStep).toBeGreaterThan(0.01);
  });
});
