/**
 * Optimizer benchmark: our SQP against SciPy SLSQP on the Williams–Otto reactor, and our LP path
 * (HiGHS cold; warm re-solves by our warm simplex, by name and by index, and by HiGHS itself)
 * against SciPy `linprog(method="highs")` on random sparse LPs, with HiGHS's own cost of a run that has
 * nothing to do. Both sides run in the same process tree
 * in the same run; Python times itself with time.perf_counter.
 *
 * Run: npx tsx bench/optimize.ts
 */
import { spawnSync } from "node:child_process";
import { performance } from "node:perf_hooks";
import { createRandom } from "../services/kit/random.js";
import {
  createHighsLp,
  type LpProblem,
  loadHighs,
  solveLpHighs,
  solveLpJs,
} from "../services/optimize/lp.js";
import { solveNlp } from "../services/optimize/sqp.js";
import { PLANT, sequentialProblem, simultaneousProblem } from "../test/fixtures/williams-otto.js";

/** Seeded uniform numbers, so that every run sees the same data. */
const rng = (seed: number): (() => number) => createRandom(seed).uniform;

interface RandomLp {
  n: number;
  m: number;
  cost: number[];
  /** 5 % of the costs moved by up to ±20 % (a large cycle-to-cycle change). */
  costWarm: number[];
  /** Every cost moved by up to ±2 % (prices moving a few per cent per cycle). */
  costDrift: number[];
  rows: { idx: number[]; val: number[]; ub: number }[];
}

/** A feasible, bounded sparse LP: 0 ≤ x ≤ 10, m = n/2 rows Σ a·x ≤ b built around a feasible point. */
function randomLp(n: number, seed: number): RandomLp {
  const r = rng(seed);
  const m = Math.max(1, Math.floor(n / 2));
  const x0 = Array.from({ length: n }, () => 10 * r());
  const rows = Array.from({ length: m }, () => {
    const k = Math.min(n, 4 + Math.floor(6 * r()));
    const set = new Set<number>();
    while (set.size < k) set.add(Math.floor(r() * n));
    const idx = [...set].sort((a, b) => a - b);
    const val = idx.map(() => 0.5 + 2 * r());
    const ax = idx.reduce((s, j, q) => s + val[q]! * x0[j]!, 0);
    return { idx, val, ub: ax + 5 * r() };
  });
  const cost = Array.from({ length: n }, () => 2 * r() - 1);
  const costWarm = cost.slice();
  // Warm case: 5 % of the costs perturbed by up to ±20 %.
  for (let q = 0; q < Math.max(1, Math.round(0.05 * n)); q++) {
    const j = Math.floor(r() * n);
    costWarm[j] = cost[j]! * (0.8 + 0.4 * r());
  }
  const costDrift = cost.map((c) => c * (0.98 + 0.04 * r()));
  return { n, m, cost, costWarm, costDrift, rows };
}

function toProblem(lp: RandomLp, cost: number[]): LpProblem {
  return {
    sense: "min",
    variables: cost.map((c, j) => ({ name: `x${j}`, cost: c, lb: 0, ub: 10 })),
    constraints: lp.rows.map((row, i) => ({
      name: `r${i}`,
      coeffs: Object.fromEntries(row.idx.map((j, q) => [`x${j}`, row.val[q]!])),
      ub: row.ub,
    })),
  };
}

const BATCHES = 7;
const median = (values: number[]) => {
  const sorted = [...values].sort((a, b) => a - b);
  return sorted[Math.floor(sorted.length / 2)] as number;
};

/**
 * Time per call in ms: the median over BATCHES batches of the mean over enough repetitions to fill
 * `budgetMs / BATCHES` (the machine is shared; a median ignores a batch that another process slowed).
 */
function timeIt(fn: () => void, budgetMs = 700, minReps = 3): number {
  fn();
  const batches: number[] = [];
  for (let b = 0; b < BATCHES; b++) {
    let reps = 0;
    const t0 = performance.now();
    while (reps < minReps || performance.now() - t0 < budgetMs / BATCHES) {
      fn();
      reps++;
    }
    batches.push((performance.now() - t0) / reps);
  }
  return median(batches);
}

const PY = `
import json, sys, time
import numpy as np
from scipy.optimize import minimize, linprog
from scipy.sparse import csr_matrix
data = json.loads(sys.stdin.read())
FA=1.8275; W=2105.0
k0=np.array([1.6599e6,7.2117e8,2.6745e12]); E=np.array([6666.7,8333.3,11111.0])
NU=np.array([[-1,-1,2,0,0,0],[0,-1,-2,2,0,1],[0,0,-1,0,1.5,-0.5]]).T
guess=np.array([0.104906,0.385284,0.019562,0.28397,0.09644,0.109838])
def bal(u,x):
    FB,T=u; F=FA+FB; tK=T+273.15
    k=k0*np.exp(-E/tK)*W
    r=k*np.array([x[0]*x[1],x[1]*x[2],x[2]*x[5]])
    d=np.zeros((3,6)); d[0,0]=k[0]*x[1]; d[0,1]=k[0]*x[0]; d[1,1]=k[1]*x[2]; d[1,2]=k[1]*x[1]; d[2,2]=k[2]*x[5]; d[2,5]=k[2]*x[2]
    g=-F*x+NU@r; g[0]+=FA; g[1]+=FB
    gFB=-x.copy(); gFB[1]+=1
    return g,-F*np.eye(6)+NU@d,np.column_stack([gFB,NU@(r*E/tK**2)])
def make_seq():
    last={'x':guess.copy(),'u':None,'val':None}
    def at(u):
        if last['u'] is None or not np.array_equal(last['u'],u):
            x=last['x'].copy()
            for it in range(50):
                g,gx,gu=bal(u,x)
                if np.max(np.abs(g))<=1e-14: break
                x=x+np.linalg.solve(gx,-g)
            g,gx,gu=bal(u,x)
            dxdu=np.linalg.solve(gx,-gu); F=FA+u[0]
            phi=1143.38*F*x[5]+25.92*F*x[3]-76.23*FA-114.34*u[0]
            dpdx=np.zeros(6); dpdx[5]=1143.38*F; dpdx[3]=25.92*F
            grad=np.array([1143.38*x[5]+25.92*x[3]-114.34,0.0])+dpdx@dxdu
            last.update(x=x,u=np.array(u,copy=True),val=(-phi,-grad))
        return last['val']
    return (lambda u: at(u)[0]), (lambda u: at(u)[1])
def sim_f(v): F=FA+v[0]; x=v[2:]; return -(1143.38*F*x[5]+25.92*F*x[3]-76.23*FA-114.34*v[0])
def sim_g(v):
    F=FA+v[0]; x=v[2:]; g=np.zeros(8); g[0]=1143.38*x[5]+25.92*x[3]-114.34; g[7]=1143.38*F; g[5]=25.92*F; return -g
cons=[{'type':'eq','fun':lambda v: bal(v[:2],v[2:])[0],'jac':lambda v: np.hstack([bal(v[:2],v[2:])[2],bal(v[:2],v[2:])[1]])}]
def timeit(fn, budget=0.7, minreps=3):
    fn(); batches=[]
    for b in range(data['batches']):
        reps=0; t0=time.perf_counter()
        while reps<minreps or time.perf_counter()-t0<budget/data['batches']:
            fn(); reps+=1
        batches.append((time.perf_counter()-t0)/reps*1e3)
    return batches
out={}
ftol=data['ftol']
def seq():
    f,g=make_seq()
    return minimize(f,[4.0,75.0],jac=g,bounds=[(3,6),(70,100)],method='SLSQP',options=dict(ftol=ftol,maxiter=200))
def sim():
    return minimize(sim_f,np.concatenate([[4.0,75.0],guess]),jac=sim_g,bounds=[(3,6),(70,100)]+[(0,1)]*6,constraints=cons,method='SLSQP',options=dict(ftol=ftol,maxiter=500))
for name,fn in [('seq',seq),('sim',sim)]:
    r=fn(); out[name]=dict(ms=timeit(fn),x=list(map(float,r.x[:2])),f=float(-r.fun),nit=int(r.nit),ok=bool(r.success))
out['lp']=[]
for lp in data['lps']:
    n=lp['n']; rows=lp['rows']
    indptr=[0]; idx=[]; val=[]
    for row in rows:
        idx+=row['idx']; val+=row['val']; indptr.append(len(idx))
    A=csr_matrix((val,idx,indptr),shape=(len(rows),n)); b=np.array([row['ub'] for row in rows])
    def solve(c): return linprog(np.array(c),A_ub=A,b_ub=b,bounds=(0,10),method='highs')
    r=solve(lp['cost']); rw=solve(lp['costWarm']); rd=solve(lp['costDrift'])
    out['lp'].append(dict(n=n,cold=timeit(lambda: solve(lp['cost'])),warm=timeit(lambda: solve(lp['costWarm'])),
        drift=timeit(lambda: solve(lp['costDrift'])),obj=float(r.fun),objWarm=float(rw.fun),objDrift=float(rd.fun),nit=int(r.nit)))
print(json.dumps(out))
`;

const digits = (a: number, b: number) => {
  const rel = Math.abs(a - b) / Math.max(1e-300, Math.abs(b));
  return rel === 0 ? 16 : Math.max(0, -Math.log10(rel));
};

interface PeerRun {
  seq: { ms: number[]; x: number[]; f: number; nit: number; ok: boolean };
  sim: { ms: number[]; x: number[]; f: number; nit: number; ok: boolean };
  lp: {
    n: number;
    cold: number[];
    warm: number[];
    drift: number[];
    obj: number;
    objWarm: number;
    objDrift: number;
    nit: number;
  }[];
}

function runPeer(lps: RandomLp[]): PeerRun {
  const py = spawnSync("python3", ["-c", PY], {
    input: JSON.stringify({ ftol: 1e-12, lps, batches: BATCHES }),
    maxBuffer: 1 << 26,
    encoding: "utf8",
  });
  if (py.status !== 0) throw new Error(`python3 failed: ${py.stderr}`);
  return JSON.parse(py.stdout) as PeerRun;
}

const pad = (v: string, w: number) => v.padStart(w);

async function main() {
  const tolerance = 1e-10;
  const sizes = [50, 500, 2000];
  const lps = sizes.map((n, k) => randomLp(n, 1000 + k));
  // The peer runs before and after ours; its times are medians over both runs' batches.
  const peerRuns = [runPeer(lps)];

  const sqp = (
    [
      ["sequential", () => sequentialProblem(PLANT, [4, 75])],
      ["simultaneous", () => simultaneousProblem(PLANT, [4, 75])],
    ] as const
  ).map(([name, make]) => {
    const r = solveNlp(make(), { tolerance });
    return { name, r, ms: timeIt(() => solveNlp(make(), { tolerance })) };
  });

  const highs = await loadHighs();
  // Warm-up: V8 compiles the WebAssembly module with its baseline compiler first and optimizes hot
  // functions in the background; without this the first sizes measured pay for the tier-up (2–3× at
  // n = 50 here), which a long-running service does not. SciPy's HiGHS is compiled ahead of time.
  for (const lp of lps) for (let k = 0; k < 5; k++) solveLpHighs(highs, toProblem(lp, lp.cost));
  const lpRows = lps.map((lp) => {
    const p = toProblem(lp, lp.cost);
    const cold = solveLpHighs(highs, p);
    const coldMs = timeIt(() => solveLpHighs(highs, p));
    const jsMs = lp.n <= 50 ? timeIt(() => solveLpJs(p)) : Number.NaN;
    const js = lp.n <= 50 ? solveLpJs(p) : undefined;
    const byName = (costs: number[]) => Object.fromEntries(costs.map((c, j) => [`x${j}`, c]));
    /**
     * Warm re-solves alternating between `costs` and the original ones. "name": setCosts by name, only
     * the objective read (records are built on first read); "index": a model made with `records: false`,
     * setCostVector and the values read through the typed array; "stage": what the optimize stage does
     * each cycle (costs by name, every bound and limit re-stated, and the three records read).
     */
    // Move limits: every box at the cold optimum ± 1, inside [0, 10].
    const box = Array.from(cold.columnValues, (x) => [Math.max(0, x - 1), Math.min(10, x + 1)] as const);
    const warm = (costs: number[], mode: "name" | "index" | "highs" | "stage" | "moves" | "moves-highs") => {
      const byIndex = mode !== "name" && mode !== "stage";
      const moves = mode === "moves" || mode === "moves-highs";
      const model = createHighsLp(highs, p, {
        records: !byIndex,
        warmSimplex: mode !== "highs" && mode !== "moves-highs",
      });
      model.solve();
      const named = [byName(costs), byName(lp.cost)];
      const indexed = [Float64Array.from(costs), Float64Array.from(lp.cost)];
      const iterations: number[] = [];
      let flip = 0;
      let obj = Number.NaN;
      let sink = 0;
      // Alternate between the two cost vectors so that every timed re-solve has pivots to do.
      const ms = timeIt(() => {
        if (byIndex) model.setCostVector(indexed[flip % 2]!);
        else model.setCosts(named[flip % 2]!);
        if (moves)
          for (const [j, v] of p.variables.entries()) {
            if (flip % 2 === 0) model.setVariableBounds(v.name, box[j]![0], box[j]![1]);
            else model.setVariableBounds(v.name, 0, 10);
          }
        if (mode === "stage") {
          for (const v of p.variables)
            model.setVariableBounds(v.name, v.lb ?? 0, v.ub ?? Number.POSITIVE_INFINITY);
          for (const c of p.constraints)
            model.setConstraintLimits(
              c.name,
              c.lb ?? Number.NEGATIVE_INFINITY,
              c.ub ?? Number.POSITIVE_INFINITY,
            );
        }
        const r = model.solve();
        if (byIndex) for (const x of r.columnValues) sink += x;
        if (mode === "stage") sink += (r.values.x0 ?? 0) + (r.duals.r0 ?? 0) + (r.reducedCosts.x0 ?? 0);
        if (flip % 2 === 0) obj = r.objective;
        iterations.push(r.iterations ?? Number.NaN);
        flip++;
      });
      model.dispose();
      // The sum keeps the reads from being optimized away; it is finite whenever the solves were optimal.
      if (!Number.isFinite(sink)) throw new Error(`warm ${mode}: non-finite values read`);
      return { ms, obj, iterations: median(iterations) };
    };
    /**
     * HiGHS's floor: `run()` on a solved model with nothing changed, on a raw HiGHS model (no JavaScript
     * of ours), and our indexed `solve()` with nothing changed (the floor plus reading the result).
     */
    const floor = () => {
      const rowStarts = new Int32Array(lp.m + 1);
      lp.rows.forEach((row, i) => {
        rowStarts[i + 1] = rowStarts[i]! + row.idx.length;
      });
      const raw = highs.createModel({
        numCols: lp.n,
        numRows: lp.m,
        sense: highs.constants.objectiveSense.minimize,
        colCost: Float64Array.from(lp.cost),
        colLower: new Float64Array(lp.n),
        colUpper: new Float64Array(lp.n).fill(10),
        rowLower: new Float64Array(lp.m).fill(-highs.infinity),
        rowUpper: Float64Array.from(lp.rows, (row) => row.ub),
        matrix: {
          format: "csr",
          numRows: lp.m,
          numCols: lp.n,
          starts: rowStarts,
          indices: Int32Array.from(lp.rows.flatMap((row) => row.idx)),
          values: Float64Array.from(lp.rows.flatMap((row) => row.val)),
        },
      });
      raw.options.set({ output_flag: false });
      raw.run();
      const runMs = timeIt(() => raw.run());
      raw.dispose();
      const model = createHighsLp(highs, p, { records: false });
      model.solve();
      let sink = 0;
      const oursMs = timeIt(() => {
        for (const x of model.solve().columnValues) sink += x;
      });
      model.dispose();
      if (!Number.isFinite(sink)) throw new Error("floor: non-finite values read");
      return { runMs, oursMs };
    };
    return {
      lp,
      cold,
      coldMs,
      jsMs,
      js,
      moves: { ours: warm(lp.costDrift, "moves"), highs: warm(lp.costDrift, "moves-highs") },
      movesRef: solveLpHighs(highs, {
        ...toProblem(lp, lp.costDrift),
        variables: toProblem(lp, lp.costDrift).variables.map((v, j) => ({
          ...v,
          lb: box[j]![0],
          ub: box[j]![1],
        })),
      }).objective,
      big: {
        name: warm(lp.costWarm, "name"),
        index: warm(lp.costWarm, "index"),
        highs: warm(lp.costWarm, "highs"),
      },
      drift: {
        name: warm(lp.costDrift, "name"),
        index: warm(lp.costDrift, "index"),
        highs: warm(lp.costDrift, "highs"),
      },
      cycle: warm(lp.costDrift, "stage"),
      floor: floor(),
    };
  });
  peerRuns.push(runPeer(lps));
  const [before, after] = peerRuns as [PeerRun, PeerRun];
  const both = (pick: (run: PeerRun) => number[]) => median([...pick(before), ...pick(after)]);

  console.log("SQP on Williams–Otto from (4, 75), exact derivatives; ours tolerance 1e-10, SLSQP ftol 1e-12");
  console.log(
    "form          ours ms  SLSQP ms  ratio  ours it  SLSQP it  ours φ             SLSQP φ            digits φ  digits FB",
  );
  for (const { name, r, ms } of sqp) {
    const ref = name === "sequential" ? before.seq : before.sim;
    const refMs = both((run) => (name === "sequential" ? run.seq.ms : run.sim.ms));
    console.log(
      `${name.padEnd(13)} ${ms.toFixed(3).padStart(7)}  ${refMs.toFixed(3).padStart(8)}  ${(ms / refMs).toFixed(2).padStart(5)}  ` +
        `${String(r.iterations).padStart(7)}  ${String(ref.nit).padStart(8)}  ${r.f.toPrecision(16).padEnd(17)}  ` +
        `${ref.f.toPrecision(16).padEnd(17)}  ${digits(r.f, ref.f).toFixed(1).padStart(8)}  ${digits(r.x[0]!, ref.x[0]!).toFixed(1).padStart(9)}   (${r.status})`,
    );
  }

  console.log("\nLP, random sparse feasible bounded (m = n/2, 4–9 nonzeros per row); times in ms, medians");
  console.log(
    "cold: a fresh model each solve. The optimize stage's auto choice is HiGHS at all three sizes (it gives\n" +
      "javascript-lp-solver only LPs of ≤ 8 variables), so 'ours cold' is what the product runs.",
  );
  console.log(
    `${pad("n", 5)}  ${pad("ours cold", 9)}  ${pad("SciPy", 7)}  ${pad("ratio", 5)}  ${pad("it ours/SciPy", 13)}  ${pad("|Δobj| rel", 10)}`,
  );
  lpRows.forEach((row, k) => {
    const peer = before.lp[k]!;
    const peerCold = both((run) => run.lp[k]!.cold);
    console.log(
      `${pad(String(row.lp.n), 5)}  ${pad(row.coldMs.toFixed(3), 9)}  ${pad(peerCold.toFixed(3), 7)}  ${pad((row.coldMs / peerCold).toFixed(2), 5)}  ` +
        `${pad(`${row.cold.iterations}/${peer.nit}`, 13)}  ${pad((Math.abs(row.cold.objective - peer.obj) / Math.abs(peer.obj)).toExponential(1), 10)}`,
    );
  });
  console.log(
    "\nwarm: a kept model re-solved after a cost change, against SciPy's cold solve of the changed problem (SciPy\n" +
      "cannot warm-start). 'large' = 5 % of costs by up to ±20 %; 'drift' = every cost by up to ±2 %; 'stage cycle' =\n" +
      "drift plus every bound and limit re-stated, as the optimize stage does each cycle. Each timed re-solve\n" +
      "alternates between the changed and the original costs, so every one has pivots to do.\n" +
      "by name: setCosts({ name: cost }), solve, the objective read (the default API; its by-name records are built\n" +
      "on first read, which stage cycle does, as the stage does). by index: a model made with records: false,\n" +
      "setCostVector(Float64Array),\n" +
      "solve, all values summed through result.columnValues. Both use the kept model's own warm simplex\n" +
      "(the default, warm-simplex.ts); 'HiGHS' is by index with warmSimplex: false, HiGHS re-running from its basis.\n" +
      "pivots: by name / by index / HiGHS.",
  );
  console.log(
    `${pad("n", 5)}  ${pad("change", 11)}  ${pad("by name", 8)}  ${pad("ratio", 6)}  ${pad("by index", 8)}  ${pad("ratio", 6)}  ` +
      `${pad("HiGHS", 7)}  ${pad("ratio", 6)}  ${pad("SciPy", 7)}  ${pad("pivots", 8)}  ${pad("|Δobj| rel", 10)}`,
  );
  lpRows.forEach((row, k) => {
    const peer = before.lp[k]!;
    for (const [label, w, peerMs, ref] of [
      ["large", row.big, both((run) => run.lp[k]!.warm), peer.objWarm],
      ["drift", row.drift, both((run) => run.lp[k]!.drift), peer.objDrift],
      ["stage cycle", { name: row.cycle }, both((run) => run.lp[k]!.drift), peer.objDrift],
    ] as const) {
      const rel = (obj: number) => Math.abs(obj - ref) / Math.abs(ref);
      const idx = "index" in w ? w.index : undefined;
      const hi = "highs" in w ? w.highs : undefined;
      const cell = (r: { ms: number } | undefined, width: number) => pad(r ? r.ms.toFixed(3) : "—", width);
      const ratio = (r: { ms: number } | undefined) => pad(r ? (r.ms / peerMs).toFixed(3) : "—", 6);
      console.log(
        `${pad(String(row.lp.n), 5)}  ${pad(label, 11)}  ${cell(w.name, 8)}  ${ratio(w.name)}  ${cell(idx, 8)}  ${ratio(idx)}  ` +
          `${cell(hi, 7)}  ${ratio(hi)}  ${pad(peerMs.toFixed(3), 7)}  ` +
          `${pad(`${w.name.iterations}/${idx ? idx.iterations : "—"}/${hi ? hi.iterations : "—"}`, 8)}  ` +
          `${pad(Math.max(rel(w.name.obj), idx ? rel(idx.obj) : 0, hi ? rel(hi.obj) : 0).toExponential(1), 10)}`,
      );
    }
  });
  console.log(
    "\nmove-limit cycle: costs drift and every variable's box moves to the cold optimum ± 1 (inside [0, 10]), then\n" +
      "back to the original costs and [0, 10]; costs by index, boxes by name (setVariableBounds). Ours: the warm\n" +
      "simplex (primal phase for the costs, dual phase for the boxes); HiGHS: warmSimplex: false. Ratios against\n" +
      "SciPy's cold solve of the drift LP (same size and rows; SciPy keeps no model). |Δobj| against a cold HiGHS\n" +
      "solve of the boxed LP.",
  );
  console.log(
    `${pad("n", 5)}  ${pad("ours", 7)}  ${pad("ratio", 6)}  ${pad("HiGHS", 7)}  ${pad("ratio", 6)}  ${pad("SciPy", 7)}  ${pad("pivots", 7)}  ${pad("|Δobj| rel", 10)}`,
  );
  lpRows.forEach((row, k) => {
    const peerMs = both((run) => run.lp[k]!.drift);
    const { ours, highs: hi } = row.moves;
    const rel = Math.max(
      Math.abs(ours.obj - row.movesRef) / Math.abs(row.movesRef),
      Math.abs(hi.obj - row.movesRef) / Math.abs(row.movesRef),
    );
    console.log(
      `${pad(String(row.lp.n), 5)}  ${pad(ours.ms.toFixed(3), 7)}  ${pad((ours.ms / peerMs).toFixed(3), 6)}  ` +
        `${pad(hi.ms.toFixed(3), 7)}  ${pad((hi.ms / peerMs).toFixed(3), 6)}  ${pad(peerMs.toFixed(3), 7)}  ` +
        `${pad(`${ours.iterations}/${hi.iterations}`, 7)}  ${pad(rel.toExponential(1), 10)}`,
    );
  });
  console.log(
    "\nHiGHS floor per run: run() on a solved raw HiGHS model with nothing changed (no JavaScript of ours),\n" +
      "and our indexed solve() with nothing changed (the warm simplex's pricing pass + reading the result);\n" +
      "ratios against SciPy's cold solve of the same LP. No re-solve through HiGHS can get below its floor.",
  );
  console.log(
    `${pad("n", 5)}  ${pad("HiGHS floor", 11)}  ${pad("ratio", 6)}  ${pad("ours unchanged", 14)}  ${pad("ratio", 6)}  ${pad("SciPy", 7)}`,
  );
  lpRows.forEach((row, k) => {
    const peerCold = both((run) => run.lp[k]!.cold);
    const { runMs, oursMs } = row.floor;
    console.log(
      `${pad(String(row.lp.n), 5)}  ${pad(runMs.toFixed(3), 11)}  ${pad((runMs / peerCold).toFixed(3), 6)}  ` +
        `${pad(oursMs.toFixed(3), 14)}  ${pad((oursMs / peerCold).toFixed(3), 6)}  ${pad(peerCold.toFixed(3), 7)}`,
    );
  });
  const small = lpRows[0]!;
  const peerSmall = both((run) => run.lp[0]!.cold);
  console.log(
    `\njavascript-lp-solver at n = 50 (not the stage's auto choice at this size): ${small.jsMs.toFixed(3)} ms ` +
      `(${(small.jsMs / peerSmall).toFixed(2)}× SciPy), |Δobj| rel ` +
      `${(Math.abs(small.js!.objective - before.lp[0]!.obj) / Math.abs(before.lp[0]!.obj)).toExponential(1)}`,
  );
}

await main();
