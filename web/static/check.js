// Rendering of the setpoint check (verdict, reasons, margins, safety figures, states, upsets) and of
// simulated responses. Shared by the scenario page and the print view.

import { fmtByKey, plainKey, fmtTemp, fmtTime, fmtPct, toC, plainText } from "./units.js";

export const VERDICT_WORDS = {
  inside: "Inside the safe window",
  marginal: "Marginal: review before running here",
  outside: "Outside the safe window",
};

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
  box.append(el("span", { class: "verdict-mark", "aria-hidden": "true", text: v === "inside" ? "✓" : v === "marginal"
    ? "!" : "✕" }), el("span", { text: VERDICT_WORDS[v] || v }));
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

// Upset battery table; onOpen(i) opens a response (omitted in print).
export function renderUpsets(table, upsets, onOpen) {
  table.textContent = "";
  const head = ["Upset", "Peak temperature", "at", "Time to the temperature alarm", "Time to maximum temperature", "Level range",
    "Settles at"];
  if (onOpen) head.push("");
  table.append(el("tr", {}, ...head.map((h) => el("th", { scope: "col", text: h }))));
  (upsets || []).forEach((u, i) => {
    const [, peak] = pick(u, "peak_temperature_K");
    const [, peakAt] = pick(u, "peak_time_s", "time_of_peak_s", "peak_at_s");
    const [, alarm] = pick(u, "time_to_alarm_s", "alarm_time_s");
    const [, tmax] = pick(u, "time_to_max_temperature_s", "max_temperature_time_s");
    const lmin = u.level_min_m ?? (u.level_range_m ? u.level_range_m[0] : undefined);
    const lmax = u.level_max_m ?? (u.level_range_m ? u.level_range_m[1] : undefined);
    const settle = u.final_temperature_K;
    const crosses = u.crosses_max_temperature ?? (tmax !== null && tmax !== undefined);
    const cells = [
      el("th", { scope: "row", text: upsetName(u, i) }), el("td", { text: fmtTemp(peak) }),
      el("td", { text: fmtTime(peakAt) }), el("td", { text: alarm === null || alarm === undefined ? "none" : fmtTime(alarm) }),
      el("td", { text: tmax === null || tmax === undefined ? "none" : fmtTime(tmax) }),
      el("td", { text: Number.isFinite(lmin) && Number.isFinite(lmax) ? `${lmin.toFixed(2)}–${lmax.toFixed(2)} m` : "—" }),
      el("td", { text: typeof settle === "number" ? `${fmtTemp(settle)}${u.settled === false ? " (still moving)" : ""}`
        : "—" }),
    ];
    if (onOpen) {
      const b = el("button", { type: "button", "data-upset": String(i), text: "Show response",
        "aria-label": `Show the response to: ${upsetName(u, i)}` });
      b.addEventListener("click", () => onOpen(i));
      cells.push(el("td", {}, b));
    }
    table.append(el("tr", { class: crosses ? "crosses" : null }, ...cells));
  });
}

// Temperature and level against time, with alarms and the temperature limits.
export async function drawResponse(Plotly, node, sim, { maxK, alarmK, title, heightM } = {}) {
  const t = sim.time_s.map((s) => s / 60);
  const tr = [
    { type: "scatter", mode: "lines", name: "tank temperature", x: t, y: sim.temperature_K.map(toC),
      line: { color: "#c0632b", width: 2.5 } },
  ];
  if (sim.level_m) tr.push({ type: "scatter", mode: "lines", name: "level", x: t, y: sim.level_m, yaxis: "y2",
    line: { color: "#1d3f6e", width: 2, dash: "dash" } });
  const x0 = t[0], x1 = t[t.length - 1];
  if (maxK) tr.push({ type: "scatter", mode: "lines", name: "maximum temperature", x: [x0, x1], y: [toC(maxK), toC(maxK)],
    line: { color: "#b00020", width: 1.5, dash: "dashdot" }, hoverinfo: "skip" });
  if (alarmK) tr.push({ type: "scatter", mode: "lines", name: "alarm temperature", x: [x0, x1],
    y: [toC(alarmK), toC(alarmK)], line: { color: "#7a5a00", width: 1, dash: "dot" }, hoverinfo: "skip" });
  const alarms = (sim.alarms || []).filter((a) => typeof (a.time_s ?? a.at_s) === "number");
  if (alarms.length) tr.push({ type: "scatter", mode: "markers", name: "alarms",
    x: alarms.map((a) => (a.time_s ?? a.at_s) / 60),
    y: alarms.map((a) => toC(a.temperature_K ?? interp(sim.time_s, sim.temperature_K, a.time_s ?? a.at_s))),
    text: alarms.map((a) => String(a.kind || "alarm").replace(/_/g, " ")), hovertemplate: "%{text} at %{x:.1f} min<extra></extra>",
    marker: { symbol: "triangle-up", size: 11, color: "#111" } });
  const lay = {
    height: 300, margin: { l: 58, r: 52, t: title ? 28 : 10, b: 90 },
    title: title ? { text: title, font: { size: 13 } } : undefined,
    xaxis: { title: { text: "Time [min]" }, ticks: "outside" },
    yaxis: { title: { text: "Tank temperature [°C]" }, ticks: "outside" },
    yaxis2: { title: { text: "Level [m]" }, overlaying: "y", side: "right", showgrid: false,
      range: heightM ? [0, heightM] : undefined },
    legend: { orientation: "h", y: -0.25, yanchor: "top", font: { size: 11 } }, font: { family: "system-ui, sans-serif", size: 12 },
  };
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
