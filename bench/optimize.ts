/**
 * Optimizer benchmark: our SQP against SciPy SLSQP on the Williams–Otto reactor, and our HiGHS LP
 * path (cold and warm) against SciPy `linprog(method="highs")` on random sparse LPs. Both sides run
 * in the same process tree in the same run; Python times itself with time.perf_counter.
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
  costWarm: number[];
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
  return { n, m, cost, costWarm, rows };
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

/** Mean time per call in ms over enough repetitions to fill about `budgetMs`. */
function timeIt(fn: () => void, budgetMs = 400, minReps = 5): number {
  fn();
  let reps = 0;
  const t0 = performance.now();
  while (reps < minReps || performance.now() - t0 < budgetMs) {
    fn();
    reps++;
  }
  return (performance.now() - t0) / reps;
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
def timeit(fn, budget=0.4, minreps=5):
    fn(); reps=0; t0=time.perf_counter()
    while reps<minreps or time.perf_counter()-t0<budget:
        fn(); reps+=1
    return (time.perf_counter()-t0)/reps*1e3
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
    r=solve(lp['cost']); rw=solve(lp['costWarm'])
    out['lp'].append(dict(n=n,cold=timeit(lambda: solve(lp['cost'])),warm=timeit(lambda: solve(lp['costWarm'])),obj=float(r.fun),objWarm=float(rw.fun)))
print(json.dumps(out))
`;

const digits = (a: number, b: number) => {
  const rel = Math.abs(a - b) / Math.max(1e-300, Math.abs(b));
  return rel === 0 ? 16 : Math.max(0, -Math.log10(rel));
};

async function main() {
  const tolerance = 1e-10;
  const sizes = [50, 500, 2000];
  const lps = sizes.map((n, k) => randomLp(n, 1000 + k));
  const py = spawnSync("python3", ["-c", PY], {
    input: JSON.stringify({ ftol: 1e-12, lps }),
    maxBuffer: 1 << 26,
    encoding: "utf8",
  });
  if (py.status !== 0) throw new Error(`python3 failed: ${py.stderr}`);
  const peer = JSON.parse(py.stdout) as {
    seq: { ms: number; x: number[]; f: number; nit: number; ok: boolean };
    sim: { ms: number; x: number[]; f: number; nit: number; ok: boolean };
    lp: { n: number; cold: number; warm: number; obj: number; objWarm: number }[];
  };

  console.log("SQP on Williams–Otto from (4, 75), exact derivatives; ours tolerance 1e-10, SLSQP ftol 1e-12");
  console.log(
    "form          ours ms  SLSQP ms  ratio  ours it  SLSQP it  ours φ             SLSQP φ            digits φ  digits FB",
  );
  for (const [name, make, ref] of [
    ["sequential", () => sequentialProblem(PLANT, [4, 75]), peer.seq],
    ["simultaneous", () => simultaneousProblem(PLANT, [4, 75]), peer.sim],
  ] as const) {
    const r = solveNlp(make(), { tolerance });
    const ms = timeIt(() => solveNlp(make(), { tolerance }));
    console.log(
      `${name.padEnd(13)} ${ms.toFixed(3).padStart(7)}  ${ref.ms.toFixed(3).padStart(8)}  ${(ms / ref.ms).toFixed(2).padStart(5)}  ` +
        `${String(r.iterations).padStart(7)}  ${String(ref.nit).padStart(8)}  ${r.f.toPrecision(16).padEnd(17)}  ` +
        `${ref.f.toPrecision(16).padEnd(17)}  ${digits(r.f, ref.f).toFixed(1).padStart(8)}  ${digits(r.x[0]!, ref.x[0]!).toFixed(1).padStart(9)}   (${r.status})`,
    );
  }

  const highs = await loadHighs();
  console.log("\nLP, random sparse feasible bounded (m = n/2, 4–9 nonzeros per row), HiGHS in both");
  console.log(
    "n       ours cold ms  SciPy ms  ratio   ours warm ms  SciPy(perturbed) ms  ratio    |Δobj| rel",
  );
  lps.forEach((lp, k) => {
    const p = toProblem(lp, lp.cost);
    const ref = peer.lp[k]!;
    const cold = solveLpHighs(highs, p);
    const coldMs = timeIt(() => solveLpHighs(highs, p));
    const model = createHighsLp(highs, p);
    model.solve();
    const warmCosts = [
      Object.fromEntries(lp.costWarm.map((c, j) => [`x${j}`, c])),
      Object.fromEntries(lp.cost.map((c, j) => [`x${j}`, c])),
    ];
    let flip = 0;
    let warmObj = Number.NaN;
    // Alternate between the two cost vectors so that every timed re-solve has pivots to do.
    const warmMs = timeIt(() => {
      model.setCosts(warmCosts[flip % 2]!);
      const r = model.solve();
      if (flip % 2 === 0) warmObj = r.objective;
      flip++;
    });
    model.dispose();
    const relErr = Math.max(
      Math.abs(cold.objective - ref.obj) / Math.abs(ref.obj),
      Math.abs(warmObj - ref.objWarm) / Math.abs(ref.objWarm),
    );
    console.log(
      `${String(lp.n).padEnd(7)} ${coldMs.toFixed(3).padStart(12)}  ${ref.cold.toFixed(3).padStart(8)}  ${(coldMs / ref.cold).toFixed(2).padStart(5)}   ` +
        `${warmMs.toFixed(3).padStart(12)}  ${ref.warm.toFixed(3).padStart(19)}  ${(warmMs / ref.warm).toFixed(3).padStart(5)}    ${relErr.toExponential(1)}`,
    );
  });
  const small = toProblem(lps[0]!, lps[0]!.cost);
  const js = solveLpJs(small);
  const jsMs = timeIt(() => solveLpJs(small));
  console.log(
    `\njavascript-lp-solver at n = 50: ${jsMs.toFixed(3)} ms (${(jsMs / peer.lp[0]!.cold).toFixed(2)}× SciPy), ` +
      `|Δobj| rel ${(Math.abs(js.objective - peer.lp[0]!.obj) / Math.abs(peer.lp[0]!.obj)).toExponential(1)}`,
  );
}

await main();
