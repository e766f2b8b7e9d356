// Rendering of the setpoint check (verdict, reasons, margins, safety figures, states, upsets) and of
// simulated responses. Shared by the scenario page and the print view.

import { fmtByKey, plainKey, fmtTemp, fmtTime, fmtPct, fmtDeltaK, toC, plainText } from "./units.js";

export const VERDICT_WORDS = {
  inside: "Inside the safe window",
  marginal: "Marginal: review before running here",
  outside: "Outside the safe window",
  undetermined: "Undetermined: a computation the verdict rests on failed",
};
const VERDICT_MARKS = { inside: "✓", marginal: "!", outside: "✕", undetermined: "?" };

// Alarm kinds and the ways an upset ends, in the words of the page.
export const ALARM_WORDS = {
  alarm_temperature: "temperature alarm",
  max_temperature: "maximum temperature",
  level_high: "level high",
  level_low: "level low",
  overflow: "overflow",
  empty: "tank empty",
};
const ENDINGS = {
  settled: "settled",
  overflow: "stopped: overflow",
  empty: "stopped: tank empty",
  rising: "still heating at its cap",
  falling: "still cooling at its cap",
  oscillating: "still oscillating at its cap",
  moving: "level still moving at its cap",
};

// "settled at 90 min", "stopped: overflow at 17.1 min", "still heating at its cap (24 h)", "could not be simulated"
export function upsetEnding(u) {
  if (u.stop_reason === "solver_failed") return "could not be simulated";
  const words = ENDINGS[u.ending] || u.ending || u.stop_reason || "—";
  if (!["rising", "falling", "oscillating", "moving"].includes(u.ending)) return `${words} at ${fmtTime(u.end_time_s, 3)}`;
  const bound = u.ending === "rising" && Number.isFinite(u.adiabatic_ceiling_K)
    ? `, can reach at most ${fmtTemp(u.adiabatic_ceiling_K)}` : "";
  return `${words} (${fmtTime(u.duration_s)})${bound}`;
}

// Every alarm of an upset with its time: "temperature alarm 7.6 min · maximum temperature 12.6 min".
export function upsetAlarms(u) {
  if (u.stop_reason === "solver_failed") return "unknown";
  const alarms = u.alarms || [];
  return alarms.length ? alarms.map((a) => `${ALARM_WORDS[a.kind] || String(a.kind).replace(/_/g, " ")} ${fmtTime(a.time_s, 3)}`)
    .join(" · ") : "none";
}

// Which state the tank is on, in the same words on the selector, the check, the simulation and the print sheet.
export const BRANCH_WORDS = { low: "low (cold-start)", high: "high (hot)" };

// The branch of the operating state: with several states, where it sits among the stable ones; with one,
// what the margins found around it (an extinction point below it: it is on the high branch; an ignition point
// ahead of it: the low one); null when the curve has no turning point near it.
export function operatingBranch(chk) {
  const states = chk.states || [];
  const idx = chk.state_index ?? 0;
  if (states.length > 1) {
    const stable = states.map((s, i) => (s.stability === "stable" ? i : -1)).filter((i) => i >= 0);
    if (stable.length > 1) return idx === stable[stable.length - 1] ? "high" : idx === stable[0] ? "low" : null;
    return idx === states.length - 1 ? "high" : idx === 0 ? "low" : null;
  }
  const m = chk.margins || {};
  const entries = Array.isArray(m) ? m : Object.entries(m).map(([k, v]) => ({ name: k, ...(v || {}) }));
  const notes = entries.map((e) => String(e.note || "")).join(" ");
  const has = (re) => entries.some((e) => re.test(e.name || "") && typeof e.value === "number");
  if (/hot branch|high branch/.test(notes) || has(/extinction/)) return "high";
  if (/low branch|cold branch/.test(notes) || has(/ignition/)) return "low";
  return null;
}

// {sentence, short} describing the operating state.
export function stateWords(chk) {
  const states = chk.states || [];
  if (!states.length) return { sentence: "no steady state was found", short: "no steady state" };
  const s = states[chk.state_index ?? 0] || states[0];
  const b = operatingBranch(chk);
  const stab = `${s.stability}${s.oscillatory ? ", oscillatory" : ""}`;
  if (states.length === 1) {
    const where = b ? `, on the ${BRANCH_WORDS[b]} branch` : "";
    return { sentence: `the only steady state (${stab})${where}`, short: `only one steady state${where}` };
  }
  const which = b ? `the ${BRANCH_WORDS[b]} state` : "a middle state";
  return { sentence: `${which} (${stab}), one of ${states.length} steady states`,
    short: `${which}, one of ${states.length}` };
}

export function el(tag, attrs = {}, ...children) {
  const e = document.createElement(tag);
  for (const [k, v] of Object.entries(attrs)) {
    if (v === null || v === undefined || v === false) continue;
    if (k === "class") e.className = v; else if (k === "text") e.textContent = v; else e.setAttribute(k, v);
  }
  for (const c of children) if (c !== null && c !== undefined) e.append(c);
  return e;
}

const textOf = (x) => (typeof x === "string" ? x : x && (x.message || x.text || x.reason) ? (x.message || x.text
  || x.reason) : JSON.stringify(x));

export function renderVerdict(box, check) {
  const v = check.verdict;
  box.className = `verdict verdict-${v}`;
  box.dataset.verdict = v;
  box.textContent = "";
  box.append(el("span", { class: "verdict-mark", "aria-hidden": "true", text: VERDICT_MARKS[v] || "?" }),
    el("span", { text: VERDICT_WORDS[v] || v }));
}

// With an undetermined verdict nothing computed is shown, only what failed (DESIGN.md §6).
export const showsDetails = (check) => check.verdict !== "undetermined";

// Thermal-safety figures in plain words, MTSR with what it assumes and the interlocked upset's peak beside it.
export function renderSafety(table, note, check) {
  table.textContent = "";
  const s = check.safety || {};
  const m = check.mtsr || {};
  const rows = [
    ["Adiabatic temperature rise ΔT_ad", fmtDeltaK(s.adiabatic_temperature_rise_K)],
    ["MTSR", fmtTemp(s.mtsr_K)],
    ["Interlocked cooling loss (feed and outlet stopped), peak", Number.isFinite(m.interlocked_upset_peak_temperature_K)
      ? `${fmtTemp(m.interlocked_upset_peak_temperature_K)} after ${fmtTime(m.interlocked_upset_peak_time_s)}`
      : "no jacket: not simulated"],
    ["TMRad from the operating state", Number.isFinite(s.tmr_ad_s) ? fmtTime(s.tmr_ad_s) : "no heat release"],
  ];
  if (s.decomposition) rows.push(["Decomposition", s.decomposition]);
  else {
    rows.push(["Decomposition temperature rise", fmtDeltaK(s.decomposition_temperature_rise_K)]);
    rows.push(["TD24", Number.isFinite(s.td24_K) ? fmtTemp(s.td24_K) : "not found between 250 K and 1500 K"]);
  }
  if (Number.isFinite(s.mtt_K)) rows.push(["Technical limit MTT", fmtTemp(s.mtt_K)]);
  rows.push(["Criticality class", s.criticality_class ? `${s.criticality_class} (${s.criticality_reason})`
    : `not given: ${s.criticality_reason || "—"}`]);
  for (const [k, v] of rows) table.append(el("tr", {}, el("th", { scope: "row", text: k }), el("td", { text: v })));
  if (note) note.textContent = m.assumes ? plainText(`${m.assumes}.${m.note ? " " + m.note.charAt(0).toUpperCase() + m.note.slice(1) + "." : ""}`) : "";
}

// A list of sentences in plant units (the answer's own text, SI and all, on hover); `legend` names regions.
export function renderList(ul, items, legend) {
  ul.textContent = "";
  for (const it of items || []) {
    const raw = textOf(it), shown = plainText(raw, legend);
    ul.append(el("li", { text: shown, title: shown !== raw ? raw : null }));
  }
  if (!items || !items.length) ul.append(el("li", { class: "muted", text: "none" }));
}

// A key/value table from an object (nested {value, threshold} objects get both) or a list of {name, ...}.
export function renderKV(table, obj) {
  table.textContent = "";
  const rows = [];
  if (Array.isArray(obj)) {
    for (const m of obj) rows.push([m.label || plainKey(m.name || m.key || "value"), fmtEntry(m.name || m.key || "", m)]);
  } else if (obj && typeof obj === "object") {
    for (const [k, v] of Object.entries(obj)) {
      if (k === "units") continue;
      rows.push([plainKey(k), v !== null && typeof v === "object" && !Array.isArray(v) ? fmtEntry(k, v) : fmtByKey(k, v)]);
    }
  }
  if (!rows.length) rows.push(["—", "none"]);
  for (const [k, v] of rows) table.append(el("tr", {}, el("th", { scope: "row", text: k }), el("td", { text: v })));
}

function fmtEntry(key, m) {
  const valueKey = Object.keys(m).find((k) => /^value/.test(k)) || Object.keys(m).find((k) => typeof m[k] === "number");
  const thrKey = Object.keys(m).find((k) => /^threshold|^limit/.test(k));
  const note = m.note || m.message ? plainText(m.note || m.message) : "";
  const value = valueKey ? m[valueKey] : null;
  if (value === null || value === undefined) return note ? `not applicable: ${note}` : "none";
  let s = fmtByKey(valueKey === "value" ? key : valueKey, value);
  if (thrKey && m[thrKey] !== null && m[thrKey] !== undefined) s += ` (at least ${fmtByKey(thrKey === "threshold" ?
    key : thrKey, m[thrKey])})`;
  if (m.ok === false || m.passed === false) s += " — below its threshold";
  if (note) s += ` — ${note}`;
  return s;
}

// the opening needed at the set level, or in words when no valve can take it (below or above its range)
function valveText(s) {
  if (s.valve_opening_status === "below_range") return "below its range";
  if (s.valve_opening_status === "above_range") return "above its range";
  return s.valve_opening === null || s.valve_opening === undefined ? "—" : fmtPct(s.valve_opening);
}

export function renderStates(table, states, assumedIndex) {
  table.textContent = "";
  table.append(el("tr", {}, ...["", "Temperature", "Conversion", "Stability", "Valve opening"].map((h) =>
    el("th", { scope: "col", text: h }))));
  (states || []).forEach((s, i) => {
    const stab = s.stability + (s.oscillatory ? ", oscillatory" : "");
    table.append(el("tr", { class: i === assumedIndex ? "assumed" : null },
      el("td", { text: i === assumedIndex ? "operating" : "" }), el("td", { text: fmtTemp(s.temperature_K) }),
      el("td", { text: fmtPct(s.conversion) }), el("td", { text: stab }),
      el("td", { text: valveText(s) })));
  });
  if (!states || !states.length) table.append(el("tr", {}, el("td", { colspan: "5", text: "no steady state found" })));
}

export const upsetName = (u, i) => u.label || u.title || (u.name ? plainKey(u.name) : u.key ? plainKey(u.key)
  : `Upset ${i + 1}`);

const pick = (u, ...keys) => { for (const k of keys) if (u[k] !== undefined) return [k, u[k]]; return [keys[0], undefined]; };

// Upset battery table: peak, every alarm with its time, level range, how the run ended; onOpen(i) opens a
// response (omitted in print).
export function renderUpsets(table, upsets, onOpen) {
  table.textContent = "";
  const head = ["Upset", "Peak temperature", "at", "Alarms (time after the upset)", "Level range", "How it ended"];
  if (onOpen) head.push("");
  table.append(el("tr", {}, ...head.map((h) => el("th", { scope: "col", text: h }))));
  (upsets || []).forEach((u, i) => {
    const kinds = new Set((u.alarms || []).map((a) => a.kind));
    const lmin = u.level_min_m, lmax = u.level_max_m;
    const cells = [
      el("th", { scope: "row", text: upsetName(u, i) }), el("td", { text: fmtTemp(u.peak_temperature_K) }),
      el("td", { text: fmtTime(u.peak_time_s, 3) }), el("td", { class: "alarms", text: upsetAlarms(u) }),
      el("td", { text: Number.isFinite(lmin) && Number.isFinite(lmax) ? `${lmin.toFixed(2)}–${lmax.toFixed(2)} m` : "—" }),
      el("td", { text: upsetEnding(u) }),
    ];
    if (onOpen) {
      const b = el("button", { type: "button", "data-upset": String(i), text: "Show response",
        "aria-label": `Show the response to: ${upsetName(u, i)}` });
      b.addEventListener("click", () => onOpen(i));
      cells.push(el("td", {}, b));
    }
    const bad = kinds.has("max_temperature") || kinds.has("overflow") || u.stop_reason === "solver_failed";
    table.append(el("tr", { class: bad ? "crosses" : null, "data-ending": u.ending || u.stop_reason }, ...cells));
  });
}

// Temperature and level against time, with the temperature limits, the level limits (high, low, the vessel's
// rim where it overflows), every alarm where it happened, and where and why the run stopped (`endNote`).
export async function drawResponse(Plotly, node, sim, { maxK, alarmK, title, heightM, levelHigh, levelLow,
  endNote } = {}) {
  const t = sim.time_s.map((s) => s / 60);
  const tr = [
    { type: "scatter", mode: "lines", name: "tank temperature", x: t, y: sim.temperature_K.map(toC),
      line: { color: "#c0632b", width: 2.5 } },
  ];
  if (sim.level_m) tr.push({ type: "scatter", mode: "lines", name: "level", x: t, y: sim.level_m, yaxis: "y2",
    line: { color: "#1d3f6e", width: 2, dash: "dash" } });
  const x0 = t[0], x1 = t[t.length - 1];
  const hline = (name, y, yaxis, line) => tr.push({ type: "scatter", mode: "lines", name, x: [x0, x1], y: [y, y],
    yaxis, line, hoverinfo: "skip" });
  if (maxK) hline("maximum temperature", toC(maxK), "y", { color: "#b00020", width: 1.5, dash: "dashdot" });
  if (alarmK) hline("alarm temperature", toC(alarmK), "y", { color: "#7a5a00", width: 1, dash: "dot" });
  if (sim.level_m) {
    if (heightM) hline("vessel rim (overflow)", heightM, "y2", { color: "#1d3f6e", width: 1.5, dash: "dashdot" });
    if (levelHigh) hline("level high", levelHigh, "y2", { color: "#4a6fa5", width: 1, dash: "dot" });
    if (levelLow) hline("level low", levelLow, "y2", { color: "#4a6fa5", width: 1, dash: "longdash" });
  }
  const alarms = (sim.alarms || []).filter((a) => typeof (a.time_s ?? a.at_s) === "number");
  const onLevel = (a) => /^(level_|overflow|empty)/.test(a.kind || "");
  const marks = (list, yaxis, ys, name) => {
    if (!list.length) return;
    tr.push({ type: "scatter", mode: "markers", name, x: list.map((a) => (a.time_s ?? a.at_s) / 60), y: list.map(ys),
      yaxis, text: list.map((a) => ALARM_WORDS[a.kind] || String(a.kind || "alarm").replace(/_/g, " ")),
      hovertemplate: "%{text} at %{x:.1f} min<extra></extra>", marker: { symbol: "triangle-up", size: 11, color: "#111" } });
  };
  const tAlarms = alarms.filter((a) => !onLevel(a)), lAlarms = alarms.filter(onLevel);
  marks(tAlarms, "y", (a) => toC(a.temperature_K ?? interp(sim.time_s, sim.temperature_K, a.time_s ?? a.at_s)), "temperature alarms");
  if (sim.level_m) marks(lAlarms, "y2", (a) => a.value ?? interp(sim.time_s, sim.level_m, a.time_s ?? a.at_s), "level alarms");
  const why = endNote || (sim.stop_reason && sim.stop_reason !== "completed" ? `stopped: ${ALARM_WORDS[sim.stop_reason]
    || sim.stop_reason}` : "");
  const shapes = why ? [{ type: "line", xref: "x", yref: "paper", x0: x1, x1, y0: 0, y1: 1,
    line: { color: "#444", width: 1.5, dash: "dot" } }] : [];
  const annotations = why ? [{ x: x1, xref: "x", y: 1, yref: "paper", text: why, showarrow: false, xanchor: "right",
    yanchor: "bottom", font: { size: 11 } }] : [];
  const lay = {
    height: 340, margin: { l: 58, r: 52, t: title || why ? 28 : 10, b: 120 },
    title: title ? { text: title, font: { size: 13 } } : undefined,
    xaxis: { title: { text: "Time [min]" }, ticks: "outside" },
    yaxis: { title: { text: "Tank temperature [°C]" }, ticks: "outside" },
    // the level axis keeps its own round ticks (not those of the temperature grid)
    yaxis2: { title: { text: "Level [m]" }, overlaying: "y", side: "right", showgrid: false, tickmode: "auto", nticks: 6,
      range: heightM ? [0, heightM * 1.05] : undefined },
    shapes, annotations,
    legend: { orientation: "h", y: -0.32, yanchor: "top", font: { size: 11 } }, font: { family: "system-ui, sans-serif", size: 12 },
  };
  node.dataset.endNote = why;
  await Plotly.react(node, tr, lay, { displayModeBar: false, responsive: true });
}

function interp(xs, ys, x) {
  for (let i = 1; i < xs.length; i++) if (xs[i] >= x) {
    const f = (x - xs[i - 1]) / (xs[i] - xs[i - 1] || 1);
    return ys[i - 1] + f * (ys[i] - ys[i - 1]);
  }
  return ys[ys.length - 1];
}

export function simulationSummary(sim) {
  const parts = [];
  if (typeof sim.peak_temperature_K === "number") parts.push(`Peak ${fmtTemp(sim.peak_temperature_K)}`
    + (typeof sim.peak_time_s === "number" ? ` at ${fmtTime(sim.peak_time_s)}` : ""));
  else if (sim.peak_temperature_K && typeof sim.peak_temperature_K === "object") {
    const p = sim.peak_temperature_K;
    parts.push(`Peak ${fmtTemp(p.value ?? p.temperature_K)} at ${fmtTime(p.time_s)}`);
  }
  const alarms = sim.alarms || [];
  parts.push(alarms.length ? `${alarms.length} alarm${alarms.length > 1 ? "s" : ""}: ` + alarms.map((a) =>
    `${String(a.kind || "alarm").replace(/_/g, " ")} at ${fmtTime(a.time_s ?? a.at_s)}`).join(", ") : "no alarms");
  if (sim.stop_reason && sim.stop_reason !== "completed") parts.push(`stopped early: ${sim.stop_reason}`);
  // the core says when it nudged a start off a steady state that is not stable
  if (typeof sim.message === "string" && sim.message.includes("not stable")) parts.push(sim.message.split("; ").slice(1).join("; "));
  return parts.join(" · ");
}
