// The probability map (DESIGN.md §11): per cell the share of parameter samples that put it in a region,
// shaded in a sequential palette of our own, the robust window outlined, the nominal boundaries drawn over it.
// The numbers are the map answer's own (GET /api/v1/scenarios/{id}/map?samples=..&seed=..); the link holds
// samples, seed, the shaded probability and the window.

import * as urls from "./urls.js";
import { getJSON, showProblem, wireProblemBox, boot, plotlyReady } from "./api.js";
import { layout, segments, chain, isLogSpaced } from "./map.js";
import { LINES } from "./palette.js";
import { fmtMin, fmtTemp, toMin, toC, inputMin, inputTemp, parseTime, parseTemperature } from "./units.js";

const $ = (id) => document.getElementById(id);

// Sequential palette of our own for a probability 0..1: lightness falls steadily (CIE L* about 97, 88, 75,
// 58, 40, 17; tests/web/test_uncertainty_page.py checks the steps), so it reads in greyscale print and for
// the common colour-vision deficiencies; the hue drifts from warm paper to dark plum.
export const PROBABILITY_STOPS = [
  [0.0, "#f7f5ef"],
  [0.1, "#ecdcbf"],
  [0.3, "#d8b07c"],
  [0.55, "#b27656"],
  [0.8, "#7a4357"],
  [1.0, "#2a1633"],
];
// The robust window's outline: thick, teal, with a white halo so it reads on every shade and in greyscale.
export const ROBUST = { color: "#00796b", width: 3.5 };

const SHOW_WORDS = {
  unsafe: "unsafe (runaway or unstable)",
  runaway: "runaway (a reachable state above the maximum temperature)",
  unstable: "unstable (no stable state)",
  multiple: "multiple (several steady states)",
};

function state() {
  const st = urls.readUncertaintyState();
  return { ...st, samples: st.samples ?? 256, seed: st.seed ?? 0, show: st.show ?? "unsafe" };
}

// The expected time of a computation, for the progress bar: a generous figure per sample-cell measured on a
// loaded machine (benchmarks/bench_uncertainty.py: one reaction about 0.4 us CPU per sample-cell, several
// reactions about 5 us, wall time about twice that under load); the bar says it is an estimate.
function expectedSeconds(st) {
  const n = st.points ? st.points[0] * st.points[1] : 100 * 100;
  return 2.0 + st.samples * n * ((boot().reactions || 1) > 1 ? 1e-5 : 4e-6);
}

function progress(st) {
  const box = $("unc-progress"), bar = $("unc-progress-bar"), text = $("unc-progress-text");
  const start = Date.now();
  const expected = expectedSeconds(st);
  const cells = st.points ? `${st.points[0]} × ${st.points[1]}` : "the scenario's";
  box.hidden = false;
  box.dataset.shown = String(Number(box.dataset.shown || 0) + 1); // how many computations showed progress
  const tick = () => {
    const t = (Date.now() - start) / 1000;
    const share = Math.min(0.95, t / expected);
    bar.style.width = `${(100 * share).toFixed(1)}%`;
    box.setAttribute("aria-valuenow", String(Math.round(100 * share)));
    text.textContent = `Computing ${st.samples} samples (seed ${st.seed}) × ${cells} cells: ${t.toFixed(1)} s, ` +
      (t <= expected ? `about ${expected.toFixed(0)} s expected (estimate)`
        : `longer than the estimate of ${expected.toFixed(0)} s (the server may be busy)`);
  };
  tick();
  const timer = setInterval(tick, 200);
  return () => { clearInterval(timer); box.hidden = true; };
}

function halo(trace, width) {
  return { ...trace, name: `${trace.name}:halo`, line: { color: "#ffffff", width, dash: "solid" } };
}

export function probabilityTraces(doc, show) {
  const x = doc.residence_time_s.map(toMin), y = doc.feed_temperature_K.map(toC);
  const z = doc.probability[show];
  const bound = doc.upper_bound_95[show];
  const out = [{
    type: "heatmap", name: `probability:${show}`, x, y, z, zmin: 0, zmax: 1, zsmooth: false,
    colorscale: PROBABILITY_STOPS, customdata: bound,
    colorbar: { title: { text: "probability", side: "right" }, thickness: 14, len: 0.9, tickformat: ".0%" },
    hovertemplate: "residence time %{x:.3g} min, feed %{y:.1f} °C<br>probability %{z:.3f}, " +
      "95 % bound %{customdata:.3f}<extra></extra>",
  }];
  // the robust window: the contour of its indicator at one half
  const robust = doc.robust_window.map((row) => row.map((b) => (b ? 1 : 0)));
  const outline = {
    type: "contour", name: "robust_window", x, y, z: robust, showscale: false, hoverinfo: "skip",
    contours: { start: 0.5, end: 0.5, size: 1, coloring: "none" }, line: { color: ROBUST.color, width: ROBUST.width },
  };
  out.push({ ...outline, name: "robust_window:halo", line: { color: "#ffffff", width: ROBUST.width + 3 } }, outline);
  const logx = doc.spacing ? doc.spacing === "log" : isLogSpaced(doc.residence_time_s);
  for (const [key, curve] of Object.entries(doc.boundaries || {})) {
    if (key === "cusp") continue;
    const style = LINES[key] || { color: "#333", width: 1.5, dash: "dot" };
    segments(curve).flatMap((s) => chain(s, logx)).forEach((pts, k) => {
      if (pts.length < 2) return;
      const tr = {
        type: "scatter", mode: "lines", name: `boundary:${key}:${k}`, hoverinfo: "skip",
        x: pts.map((p) => toMin(p[0])), y: pts.map((p) => toC(p[1])),
        line: { color: style.color, width: style.width, dash: style.dash },
      };
      out.push(halo(tr, style.width + 2.5), tr);
    });
  }
  return out;
}

function legend(doc) {
  const box = $("unc-legend");
  box.textContent = "";
  const item = (swatch, text) => {
    const li = document.createElement("li");
    li.append(swatch, document.createTextNode(text));
    box.append(li);
  };
  const line = (color, width, dash) => {
    const s = document.createElement("span");
    s.className = "swatch-line";
    s.style.borderTop = `${Math.max(2, Math.round(width))}px ${dash === "solid" ? "solid" : dash === "dot" ? "dotted" : "dashed"} ${color}`;
    return s;
  };
  item(line(ROBUST.color, ROBUST.width, "solid"), `robust window: 95 % bound on the unsafe probability below ${doc.max_unsafe_probability}`);
  for (const key of ["ignition", "extinction", "hopf", "max_temperature"]) {
    if (!(doc.boundaries && doc.boundaries[key] && doc.boundaries[key].length)) continue;
    item(line(LINES[key].color, LINES[key].width, LINES[key].dash), `nominal ${LINES[key].label}`);
  }
}

function summary(doc, st) {
  const p = doc.probability[st.show].flat();
  const some = p.filter((v) => v > 0 && v < 1).length, all = p.filter((v) => v === 1).length;
  const robust = doc.robust_window.flat().filter(Boolean).length;
  const band = (kind) => {
    const b = doc.boundary_bands[kind];
    const w = b.q05.map((r, i) => (r[1] !== null && b.q95[i][1] !== null ? b.q95[i][1] - r[1] : null)).filter((v) => v !== null);
    return w.length ? `${kind} moves up to ${Math.max(...w).toFixed(1)} K between its 5 % and 95 % quantiles` : "";
  };
  $("unc-summary").textContent =
    `${doc.samples} samples (seed ${doc.seed}) of ${doc.parameters.join(", ") || "nothing uncertain"}; rate constants ` +
    `stated at ${fmtTemp(doc.reference_temperature_K)}. ${SHOW_WORDS[st.show]}: certain in ${all} cells, possible in ` +
    `${some} of ${p.length}. Robust window: ${robust} cells` +
    // with n samples and none unsafe the exact bound is 1 - 0.05^(1/n): below the policy only from some n on
    (1 - Math.pow(0.05, 1 / doc.samples) >= doc.max_unsafe_probability
      ? ` (with ${doc.samples} samples no cell can qualify: even none unsafe bounds the probability at ` +
        `${(1 - Math.pow(0.05, 1 / doc.samples)).toFixed(3)}; take more samples)` : "") + ". " +
    [band("ignition"), band("extinction")].filter(Boolean).join("; ") + ".";
  const t = $("unc-drivers");
  t.textContent = "";
  const row = (cells, head) => {
    const tr = document.createElement("tr");
    cells.forEach((c, i) => {
      const td = document.createElement(head || i === 0 ? "th" : "td");
      if (head) td.scope = "col"; else if (i === 0) td.scope = "row";
      td.textContent = c;
      if (i > 0) td.className = "num";
      tr.append(td);
    });
    t.append(tr);
  };
  row(["Parameter", "Ignition [K per sd]", "Extinction [K per sd]", "Unsafe share per sd"], true);
  const f = (v, d = 2) => (v === null || v === undefined ? "—" : Number(v).toFixed(d));
  for (const d of doc.drivers) row([d.target, f(d.ignition_K_per_sd), f(d.extinction_K_per_sd), f(d.unsafe_share_per_sd, 3)]);
  if (!doc.drivers.length) row(["no uncertain parameter", "—", "—", "—"]);
}

// Set a select to a value, adding the option when the link asks for one the list does not offer.
function choose(select, value, label) {
  if (![...select.options].some((o) => o.value === value)) {
    const o = document.createElement("option");
    o.value = value;
    o.textContent = label;
    select.append(o);
  }
  select.value = value;
}

function fillForm(st) {
  $("unc-tau").value = inputMin(st.residence_time ?? NaN);
  $("unc-tin").value = inputTemp(st.feed_temperature ?? NaN);
  $("unc-branch").value = st.branch ?? "";
  choose($("unc-samples"), String(st.samples), String(st.samples));
  $("unc-seed").value = String(st.seed);
  $("unc-show").value = st.show;
  if (st.points) choose($("unc-points"), `${st.points[0]},${st.points[1]}`, `${st.points[0]} × ${st.points[1]}`);
  else $("unc-points").value = "";
}

// The form's view state; throws an Error in plain words for a setpoint that cannot be read.
function formState(st) {
  const pts = $("unc-points").value.split(",").map(Number);
  const tau = $("unc-tau").value.trim(), tin = $("unc-tin").value.trim();
  return {
    ...st, samples: Number($("unc-samples").value), seed: Math.max(0, Math.round(Number($("unc-seed").value) || 0)),
    show: $("unc-show").value, points: pts.length === 2 && pts.every((n) => n >= 2) ? pts : null,
    residence_time: tau ? parseTime(tau) : null, feed_temperature: tin ? parseTemperature(tin) : null,
    branch: $("unc-branch").value || null,
  };
}

// -- the setpoint check with confidence (the check answer's "uncertainty" block, DESIGN.md §11) ------------
const VERDICT_WORDS = {
  inside: "inside the safe operating window",
  marginal: "marginal",
  outside: "outside the safe operating window",
  undetermined: "undetermined (a computation failed)",
};
const pct = (p) => `${(100 * p).toFixed(p > 0 && p < 0.01 ? 2 : 1)} %`;
const hours = (s) => (Number.isFinite(s) ? (s >= 7200 ? `${(s / 3600).toFixed(1)} h` : `${(s / 60).toFixed(0)} min`) : "—");

function table(node, head, rows) {
  node.textContent = "";
  [head, ...rows].forEach((cells, r) => {
    const tr = document.createElement("tr");
    cells.forEach((c, i) => {
      const td = document.createElement(r === 0 || i === 0 ? "th" : "td");
      if (r === 0) td.scope = "col"; else if (i === 0) td.scope = "row";
      td.textContent = c;
      if (i > 0) td.className = "num";
      tr.append(td);
    });
    node.append(tr);
  });
}

export function checkLines(doc) {
  const u = doc.uncertainty, c = u.counts, n = u.samples;
  const b = u.upper_bound_95;
  const unc = doc.reasons.find((r) => r.startsWith("under the stated uncertainty"));
  // the check makes a nominal "inside" marginal when the bound is above the policy, with that reason only
  const nominalInside = unc && doc.verdict === "marginal" && doc.reasons.length === 1;
  const lines = [
    nominalInside
      ? "With the nominal data the setpoint is inside the safe operating window; under the uncertain data the " +
        "verdict is marginal (the reason is below)."
      : `The check's verdict is ${VERDICT_WORDS[doc.verdict] || doc.verdict}` +
        (unc ? "; the uncertain data add a reason (below)." : "."),
    `The verdict would be outside in ${c.outside} of ${n} samples: probability ${pct(u.probability_outside)}, ` +
      `at most ${pct(b.outside)} with 95 % confidence.`,
    `It would be marginal or worse in ${c.marginal_or_worse} of ${n} samples: probability ` +
      `${pct(u.probability_marginal_or_worse)}, at most ${pct(b.marginal_or_worse)} with 95 % confidence` +
      (doc.verdict !== "inside" && c.marginal_or_worse === n ? " (the nominal upsets count for every sample)." : "."),
  ];
  if (c.undetermined) lines.push(`${c.undetermined} of ${n} samples could not be computed; they are counted as outside.`);
  return lines;
}

function policyLine(doc) {
  const u = doc.uncertainty, b = u.upper_bound_95.outside, lim = u.max_unsafe_probability;
  const reason = doc.reasons.find((r) => r.startsWith("under the stated uncertainty"));
  if (reason) return `The bound is above the acceptable ${pct(lim)}, so the check carries this reason: ${reason}.`;
  return `The 95 % bound on the probability of outside, ${pct(b)}, is within the acceptable ${pct(lim)} ` +
    "(check_policy.max_unsafe_probability).";
}

async function loadCheck(id, st) {
  const status = $("unc-check-status"), body = $("unc-check-body"), box = $("unc-check");
  const url = urls.uncertaintyCheck(id, st);
  $("unc-check-json").href = url;
  $("unc-check-page").href = urls.scenarioPage(id, {
    residence_time: st.residence_time, feed_temperature: st.feed_temperature, branch: st.branch, panel: "check",
  });
  body.hidden = true;
  status.hidden = false;
  status.textContent = `Checking the setpoint with ${st.samples} samples (seed ${st.seed}); the nominal upsets are ` +
    "simulated first, which can take a while…";
  let doc;
  try {
    doc = await getJSON(url, "Checking the setpoint under the uncertain data");
  } catch (err) {
    status.textContent = `The check with confidence could not be computed: ${err.message}`;
    return;
  }
  const u = doc.uncertainty, op = doc.operating_point;
  $("unc-check-setpoint").textContent =
    `Setpoint: residence time ${fmtMin(op.residence_time_s)}, feed ${fmtTemp(op.feed_temperature_K)}` +
    (st.residence_time || st.feed_temperature ? "" : " (the scenario's own feed)") +
    `; ${u.samples} samples (seed ${u.seed}) of ${u.parameters.join(", ") || "nothing uncertain"}, rate constants ` +
    `stated at ${fmtTemp(u.reference_temperature_K)}.`;
  const ul = $("unc-check-lines");
  ul.textContent = "";
  for (const text of checkLines(doc)) {
    const li = document.createElement("li");
    li.textContent = text;
    ul.append(li);
  }
  const q = u.quantiles;
  table($("unc-check-quantiles"), ["Over the samples", "5 %", "median", "95 %"], [
    ["Steady temperature", fmtTemp(q.temperature_K.q05), fmtTemp(q.temperature_K.q50), fmtTemp(q.temperature_K.q95)],
    ["MTSR (cooling lost, adiabatic)", fmtTemp(q.mtsr_K.q05), fmtTemp(q.mtsr_K.q50), fmtTemp(q.mtsr_K.q95)],
    ["TMRad (time to maximum rate)", hours(q.tmr_ad_s.q05), hours(q.tmr_ad_s.q50), hours(q.tmr_ad_s.q95)],
  ]);
  $("unc-check-policy").textContent = policyLine(doc);
  $("unc-check-notes").textContent = `Bounds: ${u.upper_bound_basis}. Margins: ${u.margins}.`;
  const f = (v) => (v === null || v === undefined ? "—" : Number(v).toFixed(2));
  table($("unc-check-drivers"), ["Parameter", "Steady temperature [K per sd]", "MTSR [K per sd]"],
    u.drivers.length ? u.drivers.map((d) => [d.target, f(d.temperature_K_per_sd), f(d.mtsr_K_per_sd)])
      : [["no uncertain parameter", "—", "—"]]);
  status.hidden = true;
  body.hidden = false;
  box.dataset.samples = String(u.samples);
  box.dataset.seed = String(u.seed);
}

async function load(id, st) {
  showProblem(null);
  $("unc-json").href = urls.uncertaintyMap(id, st);
  $("unc-csv").href = urls.uncertaintyMap(id, st, "csv");
  document.getElementById("json-twin")?.setAttribute("href", urls.uncertaintyMap(id, st));
  const stop = progress(st);
  let doc, Plotly;
  try {
    [Plotly, doc] = await Promise.all([plotlyReady(), getJSON(urls.uncertaintyMap(id, st), "Computing the probability map")]);
  } catch (err) {
    stop();
    const nb = (err.fields || []).some((f) => f.field === "samples" && /uncertainty block/.test(f.message));
    showProblem(nb ? new Error("This scenario has no uncertainty block: add one (the uncertain parameters, " +
      "DESIGN.md §11) to the scenario, then open this page again.") : err);
    return;
  }
  stop();
  const node = $("unc-map");
  const lay = layout(doc, { height: 480 });
  lay.hovermode = "closest";
  await Plotly.react(node, probabilityTraces(doc, st.show), lay, { displayModeBar: false, responsive: true });
  node.dataset.samples = String(doc.samples);
  node.dataset.seed = String(doc.seed);
  node.dataset.show = st.show;
  legend(doc);
  summary(doc, st);
  $("unc-results").hidden = false;
}

function main() {
  wireProblemBox();
  const id = boot().scenario_id;
  let st = state();
  fillForm(st);
  $("unc-back").href = urls.scenarioPage(id, {
    map_residence_time: st.map_residence_time, map_feed_temperature: st.map_feed_temperature, points: st.points,
  });
  $("unc-form").addEventListener("submit", (ev) => {
    ev.preventDefault();
    try {
      st = formState(st);
    } catch (err) {
      showProblem(err);
      return;
    }
    history.pushState(null, "", urls.uncertaintyPage(id, st));
    load(id, st);
    loadCheck(id, st);
  });
  window.addEventListener("popstate", () => { st = state(); fillForm(st); load(id, st); loadCheck(id, st); });
  load(id, st);
  loadCheck(id, st);
}

main();
