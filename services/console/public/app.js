// The console page: one EventSource for live updates, plain DOM building (text only, never HTML
// from data), uPlot for charts. No build step: this file is served as is.
/* global uPlot */

const $ = (id) => document.getElementById(id);
const meta = (name) => document.querySelector(`meta[name="${name}"]`)?.getAttribute("content") ?? "";

const session = {
  user: meta("sf-user") || null,
  role: meta("sf-role") || null,
  csrf: meta("csrf-token") || null,
};
let state = null;

// ---------- small helpers ----------

function el(tag, attrs = {}, ...children) {
  const node = document.createElement(tag);
  for (const [k, v] of Object.entries(attrs)) {
    if (v === undefined || v === null || v === false) continue;
    if (k === "class") node.className = v;
    else if (k === "text") node.textContent = v;
    else if (k.startsWith("on")) node.addEventListener(k.slice(2), v);
    else node.setAttribute(k, v === true ? "" : String(v));
  }
  for (const c of children.flat()) {
    if (c === undefined || c === null || c === false) continue;
    node.append(c instanceof Node ? c : document.createTextNode(String(c)));
  }
  return node;
}

function fill(id, ...children) {
  const host = $(id);
  host.replaceChildren(...children.flat().filter(Boolean));
}

function empty(text) {
  return el("p", { class: "empty", text });
}

function fmt(v, digits = 4) {
  if (v === null || v === undefined || Number.isNaN(v)) return "—";
  if (!Number.isFinite(v)) return v > 0 ? "∞" : "−∞";
  const a = Math.abs(v);
  if (a >= 10000) return Math.round(v).toLocaleString("en-US");
  if (a === 0) return "0";
  if (a < 0.001) return v.toExponential(2);
  return String(Number(v.toPrecision(digits)));
}

function signed(v, digits) {
  const s = fmt(v, digits);
  return v > 0 ? `+${s}` : s.replace("-", "−");
}

const pad = (n) => String(n).padStart(2, "0");
function clock(ms) {
  if (ms === null || ms === undefined) return "—";
  const d = new Date(ms);
  return `${pad(d.getHours())}:${pad(d.getMinutes())}:${pad(d.getSeconds())}`;
}
function stamp(ms) {
  if (ms === null || ms === undefined) return "—";
  const d = new Date(ms);
  return `${d.getFullYear()}-${pad(d.getMonth() + 1)}-${pad(d.getDate())} ${clock(ms)}`;
}
function ago(ms) {
  const s = Math.round((Date.now() - ms) / 1000);
  if (s < 60) return `${Math.max(0, s)} s ago`;
  if (s < 3600) return `${Math.round(s / 60)} min ago`;
  return `${Math.round(s / 3600)} h ago`;
}

function badge(text, tone) {
  return el("span", { class: `badge ${tone ?? ""}`, text });
}

function toneOf(word) {
  if (!word) return "";
  if (
    /^(good|pass|accepted|steady|running|closed|approve|proposed|dispatched|optimal|reconciled|estimated|observed|awaiting-approval)/.test(
      word,
    )
  )
    return "ok";
  if (
    /^(aborted|alarm|fail|rejected|lost|bad|reject|refused|frozen|spike|out-of-range|stale|not-a-number|clock-skew|bad-quality|failed)/.test(
      word,
    )
  )
    return "bad";
  return "warn";
}

function table(headers, rows, cls) {
  return el(
    "table",
    { class: cls ?? "" },
    el(
      "thead",
      {},
      el(
        "tr",
        {},
        headers.map((h) => el("th", { scope: "col", text: h })),
      ),
    ),
    el("tbody", {}, rows),
  );
}

const can = (role) => {
  const order = ["viewer", "operator", "engineer"];
  return session.role !== null && order.indexOf(session.role) >= order.indexOf(role);
};

async function post(path, body) {
  const res = await fetch(path, {
    method: "POST",
    credentials: "same-origin",
    headers: { "content-type": "application/json", "x-csrf-token": session.csrf ?? "" },
    body: JSON.stringify(body),
  });
  let data = {};
  try {
    data = await res.json();
  } catch {
    data = { message: `HTTP ${res.status}` };
  }
  return { ok: res.ok, status: res.status, data };
}

// ---------- account ----------

function renderAccount() {
  const logged = Boolean(session.user);
  $("login-form").hidden = logged;
  $("who").hidden = !logged;
  $("who-name").textContent = session.user ?? "";
  $("who-role").textContent = session.role ?? "";
  $("mode-form").hidden = !can("engineer");
  if (state) renderPending();
}

$("login-form").addEventListener("submit", async (ev) => {
  ev.preventDefault();
  const username = $("login-user").value.trim();
  const password = $("login-password").value;
  const r = await post("/login", { username, password });
  if (r.ok) {
    Object.assign(session, { user: r.data.user, role: r.data.role, csrf: r.data.csrf });
    $("login-password").value = "";
    $("login-message").textContent = "";
  } else {
    $("login-message").textContent = r.data.message ?? "login failed";
  }
  renderAccount();
});

$("logout").addEventListener("click", async () => {
  await post("/logout", {});
  Object.assign(session, { user: null, role: null, csrf: null });
  renderAccount();
});

$("mode-form").addEventListener("submit", async (ev) => {
  ev.preventDefault();
  const r = await post("/api/mode", { mode: $("mode-select").value, reason: $("mode-reason").value });
  $("mode-message").textContent = r.ok
    ? `Asked for ${r.data.request.mode}; the mode card shows what the loop answers.`
    : r.data.message;
  if (r.ok) $("mode-reason").value = "";
});

// ---------- overview ----------

function renderOverview() {
  const o = state.overview;
  if (o.mode) {
    $("ov-mode").replaceChildren(badge(o.mode.mode, o.mode.mode === "closed-loop" ? "warn" : "ok"));
    $("ov-mode-note").textContent =
      `${o.mode.accepted === false ? "request refused: " : ""}${o.mode.reason} (${o.mode.user}, ${o.mode.at ? clock(o.mode.at) : ""})`;
  } else {
    $("ov-mode").textContent = "not reported";
    $("ov-mode-note").textContent = "validate has not said; the loop starts in advisory";
  }
  if (o.steady) {
    $("ov-steady").replaceChildren(badge(o.steady.state, o.steady.steady ? "ok" : "warn"));
    const waiting = o.steady.notSteady.filter((t) => t.state !== "steady").map((t) => t.tag);
    $("ov-steady-note").textContent = o.steady.steady
      ? `since ${clock(o.steady.steadySinceMs)} plant time`
      : waiting.length
        ? `waiting on ${waiting.slice(0, 4).join(", ")}`
        : `as of ${clock(o.steady.timeMs)} plant time`;
  }
  if (o.lastCycle) {
    const c = o.lastCycle;
    $("ov-cycle").replaceChildren(
      badge(c.outcome ?? c.state, toneOf(c.state === "open" ? c.outcome : c.state)),
    );
    $("ov-cycle-note").textContent = `${c.cycleId.slice(-8)} · ${c.state} · ${clock(c.lastAtMs)}`;
  }
  if (o.profit) {
    const p = o.profit;
    const word = p.sense === "max" ? "profit" : "cost";
    $("ov-profit").textContent = `${fmt(p.now)} ${p.unit}`;
    $("ov-profit-note").textContent =
      `${signed(p.change)} vs ${fmt(p.baseline)} at the first cycle seen (${word}); next move predicts ${signed(p.proposedChange)}`;
    $("ov-earned").textContent = p.earnedUnit ? `${fmt(p.earned)} ${p.earnedUnit}` : "—";
    $("ov-earned-note").textContent = p.earnedUnit
      ? "gain over the first cycle seen, summed over plant time"
      : `unit ${p.unit} has no time base`;
  }
}

// ---------- proposals waiting ----------

function renderPending() {
  const list = state.pending ?? [];
  if (list.length === 0) return fill("pending-body", empty("No proposal is waiting."));
  const blocks = list.map((p) => {
    const rows = p.setpoints.map((s) =>
      el(
        "tr",
        {},
        el("th", { scope: "row", text: s.tag }),
        el("td", { text: s.decision }),
        el("td", { class: "num", text: `${fmt(s.from)}` }),
        el("td", { class: "num strong", text: `${fmt(s.target)}` }),
        el("td", { class: "num", text: signed(s.target - s.from) }),
        el("td", { text: s.unit }),
        el("td", { class: "num", text: s.lower === null ? "—" : `${fmt(s.lower)} … ${fmt(s.upper)}` }),
        el(
          "td",
          {},
          badge(s.action === "move" ? "move" : "within deadband", s.action === "move" ? "ok" : ""),
        ),
      ),
    );
    const head = el(
      "div",
      { class: "proposal-head" },
      el("span", { class: "pid", text: `Proposal ${p.proposalId}` }),
      p.objective
        ? el("span", {
            text: `predicted ${p.objective.sense === "max" ? "gain" : "saving"} ${signed(p.objective.change)} ${p.objective.unit}`,
          })
        : null,
      el("span", {
        text: `checks: ${p.checks.passed} passed, ${p.checks.skipped} skipped, ${p.checks.failed} failed`,
      }),
      p.expiresAtMs ? el("span", { class: "expires", text: `answer before ${clock(p.expiresAtMs)}` }) : null,
    );
    const reason = el("input", {
      class: "reason",
      maxlength: "500",
      placeholder: "reason (needed to reject)",
      "aria-label": "Reason",
    });
    const msg = el("span", { class: "message", role: "status" });
    const answer = async (decision) => {
      const body = { proposalId: p.proposalId, decision };
      if (reason.value.trim()) body.reason = reason.value.trim();
      const r = await post("/api/approval", body);
      msg.textContent = r.ok
        ? `${decision === "approve" ? "Approval" : "Rejection"} sent as ${session.user}.`
        : r.data.message;
    };
    const actions = can("operator")
      ? el(
          "div",
          { class: "actions" },
          reason,
          el("button", {
            type: "button",
            class: "approve",
            onclick: () => answer("approve"),
            text: "Approve",
          }),
          el("button", { type: "button", class: "reject", onclick: () => answer("reject"), text: "Reject" }),
          msg,
        )
      : el("p", { class: "note", text: "Log in as an operator or engineer to approve or reject." });
    return el(
      "article",
      { class: "proposal", "data-proposal": p.proposalId },
      head,
      table(
        ["Setpoint", "Decision", "Now", "Proposed", "Move", "Unit", "Bounds this cycle", ""],
        rows,
        "grid",
      ),
      actions,
    );
  });
  fill("pending-body", blocks);
}

// ---------- cycles ----------

function renderCycles() {
  const cycles = state.cycles ?? [];
  if (cycles.length === 0) return fill("cycles-body", empty("No cycle yet."));
  const rows = cycles.slice(0, 15).map((c) => {
    const stages = c.stages.map((s) =>
      el(
        "li",
        {
          class: `stage ${toneOf(s.status === "stage-done" || s.status === "opened" ? s.outcome : s.status)}`,
        },
        el("span", { class: "stage-name", text: s.stage ?? s.status }),
        el("span", { class: "stage-out", text: s.outcome ?? s.status }),
        s.reasons.length
          ? el(
              "ul",
              { class: "reasons" },
              s.reasons.map((r) => el("li", {}, el("code", { text: r.code }), ` ${r.message}`)),
            )
          : null,
      ),
    );
    return el(
      "div",
      { class: "cycle" },
      el(
        "div",
        { class: "cycle-head" },
        el("span", { class: "cid", text: c.cycleId.slice(-10) }),
        badge(c.state, c.state === "open" ? "" : toneOf(c.state)),
        el("span", { class: "note", text: `${clock(c.firstAtMs)} – ${clock(c.lastAtMs)}` }),
      ),
      el("ol", { class: "stages" }, stages),
    );
  });
  fill("cycles-body", rows);
}

// ---------- control ----------

function renderControl() {
  const c = state.control;
  const parts = [];
  if (c.lastValidation) {
    const v = c.lastValidation;
    parts.push(
      el(
        "p",
        { class: "line" },
        "Last validation: ",
        badge(v.verdict, toneOf(v.verdict)),
        ` next: ${v.next} · mode ${v.mode} · ${clock(v.atMs)}`,
        v.failed.length
          ? el(
              "ul",
              { class: "reasons" },
              v.failed.map((f) => el("li", {}, el("code", { text: f.name }), ` ${f.reason}`)),
            )
          : null,
      ),
    );
  }
  if (c.commands.length) {
    parts.push(el("h3", { text: "Commands" }));
    parts.push(
      table(
        ["Seq", "Sent", "How", "Setpoints", "Approved by"],
        c.commands.slice(0, 6).map((k) =>
          el(
            "tr",
            { class: "command" },
            el("td", { class: "num", text: String(k.seq) }),
            el("td", { text: clock(k.issuedAt) }),
            el("td", { text: k.mode }),
            el("td", { text: k.setpoints.map((s) => `${s.tag} → ${fmt(s.value)} ${s.unit}`).join("; ") }),
            el("td", {
              text: k.approvedBy
                ? `${k.approvedBy.user}${k.approvedBy.reason ? ` (${k.approvedBy.reason})` : ""}`
                : "—",
            }),
          ),
        ),
        "grid",
      ),
    );
  }
  if (c.readbacks.length) {
    parts.push(el("h3", { text: "Read back" }));
    parts.push(
      table(
        ["Time", "What", "Answer", "Control mode", "Setpoints (now → target)"],
        c.readbacks.slice(0, 6).map((r) =>
          el(
            "tr",
            { class: "readback" },
            el("td", { text: clock(r.time) }),
            el("td", { text: r.trigger === "command" ? `command ${r.commandSeq}` : r.trigger }),
            el(
              "td",
              {},
              r.accepted === null
                ? "—"
                : badge(r.accepted ? "accepted" : `refused ${r.code ?? ""}`, r.accepted ? "ok" : "bad"),
            ),
            el("td", { text: `${r.mode}${r.shed ? " (shed)" : ""}` }),
            el("td", {
              text: r.setpoints
                .map((s) => `${s.tag} ${fmt(s.current)} → ${fmt(s.target)} ${s.unit}`)
                .join("; "),
            }),
          ),
        ),
        "grid",
      ),
    );
  }
  if (!parts.length) parts.push(empty("No command yet."));
  fill("control-body", parts);
}

// ---------- decisions ----------

function renderDecisions() {
  const d = state.decisions ?? [];
  if (!d.length) return fill("decisions-body", empty("No decision recorded."));
  fill(
    "decisions-body",
    table(
      ["When", "Who", "Decision", "About", "Reason"],
      d
        .slice(0, 12)
        .map((x) =>
          el(
            "tr",
            { class: "decision" },
            el("td", { text: clock(x.atMs) }),
            el("td", { text: x.user }),
            el(
              "td",
              {},
              badge(
                x.kind === "mode" ? `mode ${x.decision}` : x.decision,
                x.kind === "mode" ? "" : toneOf(x.decision),
              ),
            ),
            el("td", { text: x.proposalId ? `proposal ${x.proposalId.slice(-10)}` : "loop mode" }),
            el("td", { text: x.reason ?? "" }),
          ),
        ),
      "grid",
    ),
  );
}

// ---------- charts ----------

const charts = new Map();

function chartWidth(host) {
  return Math.max(260, Math.floor(host.getBoundingClientRect().width) - 8);
}

function makeChart(host, opts, data) {
  const u = new uPlot({ width: chartWidth(host), height: opts.height ?? 150, ...opts }, data, host);
  return u;
}

const INK = "#1b1f24";
const LINE = "#0b5563";
const SP = "#a23b00";
const GRID = { stroke: "#d9dcd6", width: 1 };
// Hours and minutes on every time axis, on this computer's clock, like the rest of the page.
const timeAxis = {
  stroke: INK,
  grid: GRID,
  ticks: GRID,
  values: (_u, splits) => splits.map((s) => clock(s * 1000).slice(0, 5)),
};
const axes = (yLabel) => [
  timeAxis,
  { stroke: INK, grid: GRID, ticks: GRID, size: 56, label: yLabel, labelSize: 18 },
];

function trendData(t) {
  // One x axis for both series: the union of the measured and setpoint times, in seconds.
  const xs = [...new Set([...t.points.map((p) => p[0]), ...t.setpoint.map((p) => p[0])])].sort(
    (a, b) => a - b,
  );
  const m = new Map(t.points.map((p) => [p[0], p[1]]));
  const sp = new Map(t.setpoint.map((p) => [p[0], p[1]]));
  let lastSp = null;
  const spSeries = xs.map((x) => {
    if (sp.has(x)) lastSp = sp.get(x);
    return t.setpoint.length ? lastSp : null;
  });
  return [xs.map((x) => x / 1000), xs.map((x) => (m.has(x) ? m.get(x) : null)), spSeries];
}

function renderTrends() {
  const grid = $("trend-grid");
  const trends = state.trends ?? [];
  if (!trends.length) return;
  grid.querySelector(".empty")?.remove();
  for (const t of trends) {
    const id = `trend:${t.tag}`;
    let c = charts.get(id);
    const data = trendData(t);
    if (!c) {
      const host = el("div", { class: "chart", "data-tag": t.tag });
      const title = el(
        "div",
        { class: "chart-title" },
        el("strong", { text: t.tag }),
        t.unit ? ` ${t.unit}` : "",
        t.key ? badge("key", "") : null,
        el("span", { class: "last" }),
      );
      grid.append(el("figure", { class: "chart-box" }, title, host));
      const u = makeChart(
        host,
        {
          height: 140,
          legend: { show: false },
          cursor: { drag: { x: false, y: false } },
          scales: { x: { time: true } },
          axes: axes(null),
          series: [
            {},
            { label: t.tag, stroke: LINE, width: 1.5, spanGaps: true },
            { label: "setpoint", stroke: SP, width: 1.5, dash: [6, 4], spanGaps: true },
          ],
        },
        data,
      );
      c = { u, title };
      charts.set(id, c);
    } else {
      c.u.setData(data);
    }
    const last = t.points.at(-1);
    c.title.querySelector(".last").textContent = last ? `${fmt(last[1])} at ${clock(last[0])}` : "";
  }
}

function applyTrendPatch(patches) {
  const byTag = new Map((state.trends ?? []).map((t) => [t.tag, t]));
  for (const p of patches) {
    let t = byTag.get(p.tag);
    if (!t) {
      t = { tag: p.tag, unit: p.unit, key: p.key, points: [], setpoint: [] };
      state.trends.push(t);
      byTag.set(p.tag, t);
    }
    t.key = p.key;
    t.unit = p.unit;
    t.points = t.points
      .filter((x) => x[0] < p.fromMs)
      .concat(p.points)
      .slice(-2000);
    if (p.setpointFromMs !== null)
      t.setpoint = t.setpoint
        .filter((x) => x[0] < p.setpointFromMs)
        .concat(p.setpoint)
        .slice(-2000);
  }
  state.trends.sort((a, b) => Number(b.key) - Number(a.key) || a.tag.localeCompare(b.tag));
}

function renderProfit() {
  const pts = state.profit ?? [];
  const host = $("profit-chart");
  if (pts.length < 1) return;
  const unit = state.overview.profit?.unit ?? "";
  const data = [pts.map((p) => p.tMs / 1000), pts.map((p) => p.now), pts.map((p) => p.earned)];
  let c = charts.get("profit");
  if (!c) {
    host.replaceChildren();
    const u = makeChart(
      host,
      {
        height: 180,
        scales: { x: { time: true }, e: {} },
        axes: [
          ...axes(unit),
          {
            side: 1,
            scale: "e",
            stroke: INK,
            grid: { show: false },
            size: 56,
            label: "earned",
            labelSize: 18,
          },
        ],
        series: [
          {},
          { label: `profit (${unit})`, stroke: LINE, width: 2, points: { show: true, size: 5 } },
          { label: "earned", scale: "e", stroke: SP, width: 1.5, dash: [6, 4] },
        ],
      },
      data,
    );
    c = { u };
    charts.set("profit", c);
  } else c.u.setData(data);
}

function renderParameters() {
  const params = state.parameters ?? [];
  const host = $("parameters-body");
  if (!params.length) return;
  host.querySelector(".empty")?.remove();
  for (const p of params) {
    const id = `param:${p.symbol}`;
    const data = [
      p.points.map((x) => x.tMs / 1000),
      p.points.map((x) => x.value),
      p.points.map((x) => x.ciUpper ?? x.value),
      p.points.map((x) => x.ciLower ?? x.value),
    ];
    let c = charts.get(id);
    if (!c) {
      const box = el("div", { class: "chart", "data-parameter": p.symbol });
      const title = el(
        "div",
        { class: "chart-title" },
        el("strong", { text: p.symbol }),
        ` ${p.unit}`,
        el("span", { class: "last" }),
      );
      host.append(el("figure", { class: "chart-box" }, title, box));
      const u = makeChart(
        box,
        {
          height: 150,
          legend: { show: false },
          scales: { x: { time: true } },
          axes: axes(null),
          series: [
            {},
            { label: p.symbol, stroke: LINE, width: 2, points: { show: true, size: 5 } },
            { label: "upper", stroke: "#7fa8ae", width: 1 },
            { label: "lower", stroke: "#7fa8ae", width: 1 },
          ],
          bands: [{ series: [2, 3], fill: "rgba(11,85,99,0.15)" }],
        },
        data,
      );
      c = { u, title };
      charts.set(id, c);
    } else c.u.setData(data);
    const last = p.points.at(-1);
    c.title.querySelector(".last").textContent = last
      ? `in force ${fmt(p.inForce)}; last ${fmt(last.value)} [${fmt(last.ciLower)}, ${fmt(last.ciUpper)}] · ${p.lastStatus}`
      : `in force ${fmt(p.inForce)} · ${p.lastStatus}`;
  }
}

// ---------- tables ----------

function renderConstraints() {
  const c = state.constraints;
  if (!c) return;
  const active = c.active ?? [];
  const rows = active.length
    ? active.map((a) =>
        el(
          "tr",
          {},
          el("th", { scope: "row", text: a.name }),
          el("td", { text: a.kind }),
          el("td", { class: "num strong", text: fmt(a.shadowPrice) }),
          el("td", { text: a.unit }),
        ),
      )
    : [
        el(
          "tr",
          {},
          el("td", {
            colspan: "4",
            class: "empty",
            text: "No limit is active: the optimum lies inside every limit.",
          }),
        ),
      ];
  fill(
    "constraints-body",
    table(["Limit", "Kind", "Shadow price", "Unit"], rows, "grid"),
    el("p", {
      class: "note",
      text: "What one more unit of room at each limit would be worth, from the latest proposal.",
    }),
  );
}

function renderTags() {
  const h = state.tagHealth;
  if (!h) return;
  const rows = h.tags.map((t) =>
    el(
      "tr",
      { class: t.status === "good" ? "" : "flag" },
      el("th", { scope: "row", text: t.tag }),
      el("td", {}, badge(t.status, toneOf(t.status))),
      el("td", { class: "num", text: String(t.good) }),
      el("td", { class: "num", text: String(t.rejected) }),
      el("td", { text: t.lastGoodTimeMs ? clock(t.lastGoodTimeMs) : "—" }),
      el("td", { class: "detail", text: t.detail ?? "" }),
    ),
  );
  fill(
    "tags-body",
    table(["Tag", "Status", "Good", "Rejected", "Last good", "Latest rejection"], rows, "grid"),
    el("p", {
      class: "note",
      text: `Counts since the previous report at ${clock(h.timeMs)}.${h.unknown ? ` ${h.unknown} unknown names seen.` : ""}`,
    }),
  );
}

function renderReconciliation() {
  const r = state.reconciliation;
  if (!r) return;
  const parts = [
    el(
      "p",
      { class: "line" },
      `Method ${r.method}. Global test: `,
      r.globalPassed === null
        ? "not run"
        : badge(r.globalPassed ? "passed" : "failed", r.globalPassed ? "ok" : "bad"),
      r.statistic !== null ? ` ${fmt(r.statistic)} against ${fmt(r.critical)}` : "",
    ),
  ];
  if (r.grossErrors.length) {
    parts.push(
      el(
        "p",
        { class: "line" },
        "Suspected gross errors: ",
        r.grossErrors.map((g) => `${g.tag} (${signed(g.estimatedSize)} ${g.unit})`).join(", "),
      ),
    );
  }
  parts.push(
    table(
      ["Tag", "Measured", "Reconciled", "Unit", "Status"],
      r.adjustments
        .slice(0, 12)
        .map((a) =>
          el(
            "tr",
            {},
            el("th", { scope: "row", text: a.tag }),
            el("td", { class: "num", text: fmt(a.measured) }),
            el("td", { class: "num", text: fmt(a.value) }),
            el("td", { text: a.unit }),
            el("td", { text: a.status }),
          ),
        ),
      "grid",
    ),
  );
  fill("rec-body", parts);
}

function renderPrices() {
  const p = state.prices;
  if (!p) return;
  fill(
    "prices-body",
    table(
      ["Price", "Value", "Unit"],
      p.prices.map((x) =>
        el(
          "tr",
          {},
          el("th", { scope: "row", text: x.symbol }),
          el("td", { class: "num", text: fmt(x.value) }),
          el("td", { text: x.unit }),
        ),
      ),
      "grid",
    ),
    el("p", {
      class: "note",
      text: `From ${stamp(p.effectiveFrom)} (${p.source})${p.nextChangeAt ? `; next change ${stamp(p.nextChangeAt)}` : ""}.`,
    }),
  );
}

function renderServices() {
  const s = state.services ?? [];
  if (!s.length) return;
  fill(
    "services-body",
    table(
      ["Service", "Status", "Last heard", "Up"],
      s.map((x) =>
        el(
          "tr",
          {},
          el("th", { scope: "row", text: `${x.service}${x.instance !== "0" ? ` / ${x.instance}` : ""}` }),
          el("td", {}, x.silent ? badge("silent", "bad") : badge(x.status, toneOf(x.status))),
          el("td", { text: ago(x.lastSeenMs) }),
          el("td", { class: "num", text: x.uptimeS === null ? "—" : `${fmt(x.uptimeS / 60, 3)} min` }),
        ),
      ),
      "grid",
    ),
  );
}

const renderers = {
  overview: renderOverview,
  services: renderServices,
  cycles: renderCycles,
  pending: renderPending,
  decisions: renderDecisions,
  control: renderControl,
  parameters: renderParameters,
  tagHealth: renderTags,
  prices: renderPrices,
  constraints: renderConstraints,
  profit: renderProfit,
  reconciliation: renderReconciliation,
  trends: renderTrends,
};

function safely(name) {
  try {
    renderers[name]();
  } catch (err) {
    console.error(`rendering ${name} failed`, err);
  }
}

function renderAll() {
  for (const name of Object.keys(renderers)) safely(name);
}

// ---------- live updates ----------

function connect() {
  const link = $("link");
  const source = new EventSource("/api/events");
  source.addEventListener("state", (ev) => {
    state = JSON.parse(ev.data);
    link.dataset.state = "live";
    link.textContent = "live";
    renderAll();
  });
  source.addEventListener("patch", (ev) => {
    if (!state) return;
    const patch = JSON.parse(ev.data);
    for (const [name, value] of Object.entries(patch.sections)) state[name] = value;
    if (patch.trends.length) applyTrendPatch(patch.trends);
    for (const name of Object.keys(patch.sections)) safely(name);
    if (patch.trends.length) safely("trends");
    if (patch.sections.overview) safely("profit");
  });
  source.addEventListener("error", () => {
    link.dataset.state = "lost";
    link.textContent = "reconnecting…";
  });
}

window.addEventListener("resize", () => {
  for (const c of charts.values()) {
    const host = c.u.root.parentElement;
    if (host) c.u.setSize({ width: chartWidth(host), height: c.u.height });
  }
});

renderAccount();
connect();
