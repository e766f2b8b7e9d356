// Steady-state curves through the setpoint and the heat-balance chart.

import { toMin, toC } from "./units.js";
import { heatInputs, heatCurves, windowFor } from "./heat.js";
import { isLogSpaced } from "./map.js";

const base = (xTitle, logx) => ({
  height: 290, margin: { l: 58, r: 12, t: 26, b: 96 }, showlegend: true,
  legend: { orientation: "h", y: -0.3, yanchor: "top", font: { size: 11 } },
  xaxis: { title: { text: xTitle }, type: logx ? "log" : "linear", ticks: "outside" },
  yaxis: { title: { text: "Tank temperature [°C]" }, ticks: "outside" },
  font: { family: "system-ui, sans-serif", size: 12 }, dragmode: "zoom",
});

// Split branch points into stable / unstable runs; a run shares its first point with the run before.
export function runs(points) {
  const out = [];
  let cur = null;
  points.forEach((p, i) => {
    if (!cur || cur.stable !== p.stable) {
      cur = { stable: p.stable, pts: i > 0 ? [points[i - 1]] : [] };
      out.push(cur);
    }
    cur.pts.push(p);
  });
  return out;
}

export function branchTraces(doc, xOf, setpointX, maxK) {
  const tr = [];
  let shownS = false, shownU = false;
  for (const r of runs(doc.points || [])) {
    const first = r.stable ? !shownS : !shownU;
    if (r.stable) shownS = true; else shownU = true;
    tr.push({
      type: "scatter", mode: "lines", name: r.stable ? "stable" : "unstable", legendgroup: r.stable ? "s" : "u",
      showlegend: first, x: r.pts.map((p) => xOf(p.value)), y: r.pts.map((p) => toC(p.temperature_K)),
      line: { color: r.stable ? "#1d3f6e" : "#c0632b", width: r.stable ? 2.5 : 2, dash: r.stable ? "solid" : "dash" },
      hovertemplate: "%{x:.4g}, %{y:.1f} °C<extra>" + (r.stable ? "stable" : "unstable") + "</extra>",
    });
  }
  const tp = doc.turning_points || [];
  if (tp.length) {
    const key = doc.parameter === "residence_time" ? "residence_time_s" : "feed_temperature_K";
    tr.push({
      type: "scatter", mode: "markers+text", name: "turning points",
      x: tp.map((t) => xOf(t[key])), y: tp.map((t) => toC(t.temperature_K)), text: tp.map((t) => t.kind),
      textposition: "top center", textfont: { size: 11 },
      marker: { symbol: "diamond", size: 10, color: "#111", line: { color: "#fff", width: 1 } },
    });
  }
  const hp = doc.hopf_points || [];
  if (hp.length) {
    const key = doc.parameter === "residence_time" ? "residence_time_s" : "feed_temperature_K";
    tr.push({
      type: "scatter", mode: "markers", name: "onset of oscillation",
      x: hp.map((t) => xOf(t[key] ?? t.value)), y: hp.map((t) => toC(t.temperature_K)),
      marker: { symbol: "square-open", size: 10, color: "#5d2a8c", line: { width: 2 } },
    });
  }
  const ys = (doc.points || []).map((p) => toC(p.temperature_K));
  const ylo = Math.min(...ys), yhi = Math.max(...ys, maxK ? toC(maxK) : -Infinity);
  tr.push({ type: "scatter", mode: "lines", name: "setpoint", x: [setpointX, setpointX], y: [ylo, yhi],
    line: { color: "#555", width: 1, dash: "dot" }, hoverinfo: "skip" });
  if (maxK) {
    const xs = (doc.points || []).map((p) => xOf(p.value));
    tr.push({ type: "scatter", mode: "lines", name: "maximum temperature", x: [Math.min(...xs), Math.max(...xs)],
      y: [toC(maxK), toC(maxK)], line: { color: "#b00020", width: 1.5, dash: "dashdot" }, hoverinfo: "skip" });
  }
  return tr;
}

// `extra`: more traces drawn over the curve (the plant's records, from plant.js), after the curve's own.
export async function drawBranch(Plotly, el, doc, setpoint, maxK, extra = []) {
  if (doc.success === false) throw new Error(doc.message || "the branch could not be traced");
  const alongTau = doc.parameter === "residence_time";
  const xOf = alongTau ? toMin : toC;
  const x = alongTau ? toMin(setpoint.residence_time) : toC(setpoint.feed_temperature);
  const values = (doc.points || []).map((p) => p.value);
  const lay = base(alongTau ? "Residence time [min]" : "Feed temperature [°C]", alongTau && isLogSpaced(values)
    || (alongTau && values.length > 1 && Math.max(...values) / Math.min(...values) > 20));
  lay.title = { text: alongTau ? "Against residence time, feed temperature held" : "Against feed temperature, residence time held",
    font: { size: 13 } };
  if (extra.length) {
    // room for the time scale on the right and a third legend row below the axis title
    lay.margin = { ...lay.margin, r: 70, b: 118 };
    lay.height += 22;
    lay.legend = { ...lay.legend, y: -0.36 };
  }
  await Plotly.react(el, [...branchTraces(doc, xOf, x, maxK), ...extra], lay, { displayModeBar: false, responsive: true });
  el.dataset.plantPoints = String(extra.reduce((n, t) => n + (t.x ? t.x.length : 0), 0));
}

// Crossings of generation and removal (steady states), by linear interpolation between grid temperatures.
export function crossings(c) {
  const out = [];
  for (let i = 1; i < c.T.length; i++) {
    const a = c.generation_W[i - 1] - c.removal_W[i - 1], b = c.generation_W[i] - c.removal_W[i];
    if (a === 0 || a * b < 0) {
      const f = a === 0 ? 0 : a / (a - b);
      out.push({ T: c.T[i - 1] + f * (c.T[i] - c.T[i - 1]),
        W: c.removal_W[i - 1] + f * (c.removal_W[i] - c.removal_W[i - 1]) });
    }
  }
  return out;
}

export async function drawHeatBalance(Plotly, el, scenarioDoc, setpoint, maxK) {
  const inp = heatInputs(scenarioDoc);
  const [lo, hi] = windowFor(inp, setpoint.feed_temperature, maxK);
  const c = heatCurves(inp, setpoint.residence_time, setpoint.feed_temperature, lo, hi);
  const kW = (v) => v / 1000;
  const T = c.T.map(toC);
  const x = crossings(c);
  const tr = [
    { type: "scatter", mode: "lines", name: "heat generated", x: T, y: c.generation_W.map(kW),
      line: { color: "#c0632b", width: 2.5 } },
    { type: "scatter", mode: "lines", name: "heat removed", x: T, y: c.removal_W.map(kW),
      line: { color: "#1d3f6e", width: 2.5, dash: "dash" } },
    { type: "scatter", mode: "markers", name: "steady states (crossings)", x: x.map((p) => toC(p.T)),
      y: x.map((p) => kW(p.W)), marker: { size: 10, color: "#ffffff", line: { color: "#111", width: 2 } } },
  ];
  if (maxK) tr.push({ type: "scatter", mode: "lines", name: "maximum temperature", x: [toC(maxK), toC(maxK)],
    y: [Math.min(0, ...c.removal_W.map(kW)), Math.max(...c.generation_W.map(kW), ...c.removal_W.map(kW))],
    line: { color: "#b00020", width: 1.5, dash: "dashdot" }, hoverinfo: "skip" });
  const lay = base("Tank temperature [°C]", false);
  lay.yaxis.title.text = "Heat flow [kW]";
  lay.title = { text: "Heat balance at the setpoint", font: { size: 13 } };
  await Plotly.react(el, tr, lay, { displayModeBar: false, responsive: true });
  return { curves: c, crossings: x };
}
