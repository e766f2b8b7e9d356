// The scenario page: setpoint, operating map, panels (check, curves, simulation, editor); state in the URL.

import * as urls from "./urls.js";
import { getJSON, postJSON, showProblem, wireProblemBox, boot, plotlyReady, ApiError } from "./api.js";
import { drawMap, drawPreview, cellAt, nearest, renderMapLegend } from "./map.js";
import { drawBranch, drawHeatBalance } from "./curves.js";
import { renderVerdict, renderList, renderKV, renderStates, renderUpsets, drawResponse, simulationSummary, upsetName,
  el, stateWords, VERDICT_WORDS, renderSafety, showsDetails, upsetEnding } from "./check.js";
import { parseTime, parseTemperature, parseFlow, fmtMin, fmtTime, fmtTemp, fmtPct, fmtFlow, inputMin, inputTemp, inputFlow,
  clean, plainText } from "./units.js";
import { Editor } from "./editor.js";
import { helpHTML } from "./events.js";
import { PlantPanel } from "./plant.js";

const $ = (id) => document.getElementById(id);
const B = boot();
const ID = B.scenario_id;
let state = urls.readState();
let Plotly = null;
const view = { scenario: null, map: null, check: null, mapCtl: null, editor: null, simulation: null,
  seq: { check: 0, hover: 0, curves: 0, sim: 0 } };
window.exomap = { view, get state() { return state; } };

// -- URL state ----------------------------------------------------------------------------------------
function syncURL(push = false) {
  const path = urls.scenarioPage(ID, state);
  if (path !== window.location.pathname + window.location.search) {
    (push ? history.pushState : history.replaceState).call(history, null, "", path);
  }
  const twin = urls.twinOfPage(ID, state);
  $("json-twin").href = twin;
  $("twin-link").href = twin;
  $("print-link").href = urls.printPage(ID, state);
  $("uncertainty-link").href = urls.uncertaintyPage(ID, state); // the setpoint and window go along
  $("dl-check").href = twin;
  $("dl-map").href = urls.mapOfPage(ID, state, "csv");
  $("dl-scenario").href = urls.apiScenario(ID);
  const lt = $("link-text");
  if (!lt.hidden) lt.value = urls.absolute(path);
}

window.addEventListener("popstate", () => {
  state = urls.readState();
  fillSetpointInputs();
  fillSimulationInputs();
  view.simulation = null;
  showPanel(state.panel || "check", false);
  refreshAll();
});

// -- defaults from the scenario ---------------------------------------------------------------------------
// Working volume at the level setpoint [m³]: residence time and feed flow are two faces of one setpoint.
const volume = (doc) => (Math.PI * doc.vessel.diameter ** 2 / 4) * doc.vessel.level_setpoint;
const nominalTau = (doc) => clean(volume(doc) / doc.feed.flow);
const flowAt = (tau) => (view.scenario && Number.isFinite(tau) ? volume(view.scenario) / tau : NaN);
const roundTau = (s) => { const m = s / 60; const p = Number(m.toPrecision(3)); return clean(p * 60); };
const roundTin = (K) => clean(Math.round((K - 273.15) * 10) / 10 + 273.15);
// The setpoint as the API takes it; the coolant temperature only when it is set away from the scenario's.
const setpoint = () => ({ residence_time: state.residence_time, feed_temperature: state.feed_temperature,
  ...(state.coolant_temperature ? { coolant_temperature: state.coolant_temperature } : {}) });
// The scenario document as the setpoint has it (the heat balance is drawn from it).
const scenarioAtSetpoint = () => (state.coolant_temperature && view.scenario.jacket
  ? { ...view.scenario, jacket: { ...view.scenario.jacket, coolant_temperature: state.coolant_temperature } } : view.scenario);
let spLast = "tau"; // which of residence time and feed flow was typed last: that one sets the setpoint

function fillSetpointInputs() {
  $("sp-tau").value = inputMin(state.residence_time);
  $("sp-tin").value = inputTemp(state.feed_temperature);
  const jacket = view.scenario && view.scenario.jacket;
  $("sp-tc-field").hidden = !jacket;
  if (jacket) $("sp-tc").value = inputTemp(state.coolant_temperature ?? jacket.coolant_temperature);
  const q = flowAt(state.residence_time);
  $("sp-flow").value = inputFlow(q);
  const nominal = view.scenario ? view.scenario.feed.flow : NaN;
  $("sp-flow-pct").textContent = Number.isFinite(q) && nominal ? `${Math.round(100 * q / nominal)} % of nominal` : "";
  spLast = "tau";
  $("sp-branch").value = state.branch === "high" ? "high" : "low";
  const m = view.map;
  const tr = state.map_residence_time || (m ? [m.residence_time_s[0], m.residence_time_s.at(-1)] : null);
  const tt = state.map_feed_temperature || (m ? [m.feed_temperature_K[0], m.feed_temperature_K.at(-1)] : null);
  const pts = state.points || (m ? [m.residence_time_s.length, m.feed_temperature_K.length] : null);
  if (tr) { $("mw-tau-lo").value = inputMin(tr[0]); $("mw-tau-hi").value = inputMin(tr[1]); }
  if (tt) { $("mw-tin-lo").value = inputTemp(tt[0]); $("mw-tin-hi").value = inputTemp(tt[1]); }
  if (pts) $("mw-points").value = `${pts[0]} × ${pts[1]}`;
}

function fieldError(id, message) {
  const n = $(id);
  n.textContent = message || "";
  n.hidden = !message;
}

// -- panels ---------------------------------------------------------------------------------------------
function showPanel(name, push = true) {
  for (const b of document.querySelectorAll("[role=tab]")) {
    const on = b.dataset.panel === name;
    b.setAttribute("aria-selected", on ? "true" : "false");
    b.tabIndex = on ? 0 : -1;
    $(b.getAttribute("aria-controls")).hidden = !on;
  }
  const changed = state.panel !== name;
  state.panel = name;
  if (changed) syncURL(push);
  if (name === "curves") loadCurves();
  if (name === "editor") openEditor();
  if (name === "plant" && view.scenario) plant().open();
  if (name === "simulate") {
    $("event-help").innerHTML = helpHTML();
    if (hasSimulation() && !view.simulation && Plotly && view.scenario) runSimulation();
  }
}

function wireTabs() {
  const tabs = [...document.querySelectorAll("[role=tab]")];
  tabs.forEach((b, i) => {
    b.addEventListener("click", () => showPanel(b.dataset.panel));
    b.addEventListener("keydown", (ev) => {
      let next = null;
      if (ev.key === "ArrowRight" || ev.key === "ArrowLeft") {
        next = tabs[(i + (ev.key === "ArrowRight" ? 1 : -1) + tabs.length) % tabs.length];
      } else if (ev.key === "Home") next = tabs[0];
      else if (ev.key === "End") next = tabs[tabs.length - 1];
      if (!next) return;
      ev.preventDefault();
      next.focus();
      showPanel(next.dataset.panel);
    });
  });
}

// -- setpoint ---------------------------------------------------------------------------------------------
let mapCoolant = null; // the coolant temperature the drawn map was computed for
function moveSetpoint(sp, { push = true } = {}) {
  state.residence_time = sp.residence_time;
  state.feed_temperature = sp.feed_temperature;
  state.upset = null;
  fillSetpointInputs();
  if (view.mapCtl) view.mapCtl.setSetpoint(setpoint());
  syncURL(push);
  loadCheck();
  if ((state.coolant_temperature || null) !== mapCoolant) loadMap();
  if (state.panel === "curves") loadCurves();
  view.simulation = null;
  if (state.panel === "simulate" && hasSimulation()) runSimulation();
}

function wireSetpoint() {
  $("sp-tau").addEventListener("input", () => { spLast = "tau"; });
  $("sp-flow").addEventListener("input", () => { spLast = "flow"; });
  $("setpoint-form").addEventListener("submit", (ev) => {
    ev.preventDefault();
    let tau, tin;
    fieldError("sp-flow-err", "");
    if (spLast === "flow") {
      try {
        const q = parseFlow($("sp-flow").value, view.scenario ? view.scenario.feed.flow : NaN);
        tau = clean(volume(view.scenario) / q);
        fieldError("sp-tau-err", "");
      } catch (e) { fieldError("sp-flow-err", e.message); }
    } else {
      try { tau = parseTime($("sp-tau").value); fieldError("sp-tau-err", ""); }
      catch (e) { fieldError("sp-tau-err", e.message); }
    }
    try { tin = parseTemperature($("sp-tin").value); fieldError("sp-tin-err", ""); }
    catch (e) { fieldError("sp-tin-err", e.message); }
    let tc = null;
    const jacket = view.scenario && view.scenario.jacket;
    if (jacket) {
      try {
        const K = parseTemperature($("sp-tc").value);
        tc = Math.abs(K - jacket.coolant_temperature) < 1e-9 ? null : K;
        fieldError("sp-tc-err", "");
      } catch (e) { fieldError("sp-tc-err", e.message.replace("temperature such as", "coolant temperature such as")); return; }
    }
    if (tau === undefined || tin === undefined) return;
    state.coolant_temperature = tc;
    state.branch = $("sp-branch").value === "high" ? "high" : null;
    moveSetpoint({ residence_time: tau, feed_temperature: tin });
  });
  $("sp-branch").addEventListener("change", () => {
    state.branch = $("sp-branch").value === "high" ? "high" : null;
    syncURL(true);
    loadCheck();
  });
  $("mw-form").addEventListener("submit", (ev) => {
    ev.preventDefault();
    try {
      const tr = [parseTime($("mw-tau-lo").value), parseTime($("mw-tau-hi").value)];
      const tt = [parseTemperature($("mw-tin-lo").value), parseTemperature($("mw-tin-hi").value)];
      const pts = $("mw-points").value.split(/[^0-9]+/).filter(Boolean).map(Number);
      if (!(tr[0] < tr[1])) throw new Error("The residence-time window must run from low to high.");
      if (!(tt[0] < tt[1])) throw new Error("The feed-temperature window must run from low to high.");
      if (pts.length !== 2 || pts.some((n) => !(n >= 2))) throw new Error("Grid: type two whole numbers, e.g. 120 × 120.");
      fieldError("mw-err", "");
      state.map_residence_time = tr;
      state.map_feed_temperature = tt;
      state.points = pts;
      syncURL(true);
      loadMap();
      if (state.panel === "curves") loadCurves();
    } catch (e) { fieldError("mw-err", e.message); }
  });
  $("mw-reset").addEventListener("click", () => {
    state.map_residence_time = state.map_feed_temperature = state.points = null;
    syncURL(true);
    loadMap();
  });
}

// -- map --------------------------------------------------------------------------------------------------
function renderLegend(doc) { renderMapLegend($("map-legend"), doc); }

function readoutGrid(sp, extra) {
  if (!view.map) return;
  const c = cellAt(view.map, sp.residence_time, sp.feed_temperature);
  const box = $("readout");
  box.textContent = "";
  box.append(el("div", { class: "readout-head", text: `${fmtMin(sp.residence_time, 4)} (${fmtFlow(flowAt(sp.residence_time), 3)}), ${fmtTemp(sp.feed_temperature)}` }),
    el("div", {}, el("strong", { text: c.region_label })));
  if (c.state_count !== null) box.append(el("div", { text: `${c.state_count} steady state${c.state_count === 1 ? "" : "s"}` }));
  if (c.max_temperature_K !== null) box.append(el("div", { text: `hottest steady state ${fmtTemp(c.max_temperature_K)}` }));
  if (c.valve_limited) box.append(el("div", { text: "valve cannot pass the flow in its usable range" }));
  if (extra) box.append(extra);
}

let hoverTimer = null;
function hoverAt(sp) {
  readoutGrid(sp);
  clearTimeout(hoverTimer);
  hoverTimer = setTimeout(async () => {
    const seq = ++view.seq.hover;
    try {
      const ans = await getJSON(urls.apiAnswer(ID, "steady", { ...sp, coolant_temperature: state.coolant_temperature }), "Reading the steady states");
      if (seq !== view.seq.hover) return;
      view.hovered = { point: sp, answer: ans };
      const list = el("ul", { class: "readout-states" });
      for (const s of ans.states || []) list.append(el("li", { text: `${fmtTemp(s.temperature_K)}, conversion ${fmtPct(s.conversion)}, ${s.stability}${s.oscillatory ? " (oscillatory)" : ""}` }));
      readoutGrid(sp, list);
    } catch { /* the grid readout stays; a failed hover read is not worth an alarm */ }
  }, 180);
}

async function loadMap(prefetched) {
  const url = urls.mapOfPage(ID, state);
  try {
    const doc = await (prefetched || getJSON(url, "Computing the operating map"));
    performance.mark("exomap:map-answer");
    view.map = doc;
    mapCoolant = state.coolant_temperature || null;
    if (!state.map_residence_time || !state.map_feed_temperature || !state.points) {
      // write the window the server chose into the URL, so a copied link keeps it
      state.map_residence_time = [doc.residence_time_s[0], doc.residence_time_s.at(-1)];
      state.map_feed_temperature = [doc.feed_temperature_K[0], doc.feed_temperature_K.at(-1)];
      state.points = [doc.residence_time_s.length, doc.feed_temperature_K.length];
      syncURL(false);
    }
    renderLegend(doc);
    fillSetpointInputs();
    view.mapCtl = await drawMap(Plotly, $("map"), doc, setpoint(), {
      onPreview: (sp) => readoutGrid(sp),
      onPick: (sp) => moveSetpoint({ residence_time: roundTau(sp.residence_time), feed_temperature: roundTin(sp.feed_temperature) }),
      onHover: hoverAt,
    });
    performance.mark("exomap:map-drawn");
    if (doc.success === false) showProblem(new Error(`The map is not complete: ${doc.message}`));
    if (view.check) renderCheck(view.check); // names the setpoint's region in the map legend's words
    $("map").dataset.drawn = String(Date.now());
    if (!$("map").dataset.firstDrawnMs) $("map").dataset.firstDrawnMs = String(Math.round(performance.now()));
  } catch (e) {
    showProblem(e);
    if (e instanceof ApiError && e.fields.length) fieldError("mw-err", e.fields.map((f) => f.message).join("; "));
  }
}

// On a touch screen the map scrolls the page like any picture; the setpoint moves under a finger only while this
// mode is on (a mouse or pen moves it as before).
function wireMoveMode() {
  const b = $("map-move-mode");
  b.addEventListener("click", () => {
    const on = b.getAttribute("aria-pressed") !== "true";
    b.setAttribute("aria-pressed", String(on));
    b.textContent = `Move the setpoint on the map: ${on ? "on" : "off"}`;
    $("map").classList.toggle("move-mode", on);
  });
}

function wireMapKeys() {
  const m = $("map");
  m.tabIndex = 0;
  m.setAttribute("role", "application");
  m.setAttribute("aria-label", "Operating map. Arrow keys move the setpoint by one grid step, Shift+arrow by ten.");
  let commit = null;
  m.addEventListener("keydown", (ev) => {
    const d0 = { ArrowLeft: [-1, 0], ArrowRight: [1, 0], ArrowUp: [0, 1], ArrowDown: [0, -1] }[ev.key];
    if (!d0 || !view.map) return;
    const d = ev.shiftKey ? d0.map((x) => 10 * x) : d0;
    ev.preventDefault();
    const xs = view.map.residence_time_s, ys = view.map.feed_temperature_K;
    const j = Math.min(xs.length - 1, Math.max(0, nearest(xs, state.residence_time) + d[0]));
    const i = Math.min(ys.length - 1, Math.max(0, nearest(ys, state.feed_temperature) + d[1]));
    const sp = { residence_time: roundTau(xs[j]), feed_temperature: roundTin(ys[i]) };
    state.residence_time = sp.residence_time;
    state.feed_temperature = sp.feed_temperature;
    view.mapCtl.setSetpoint(sp);
    readoutGrid(sp);
    fillSetpointInputs();
    clearTimeout(commit);
    commit = setTimeout(() => moveSetpoint(sp), 450);
  });
}

// -- check ------------------------------------------------------------------------------------------------
async function loadCheck() {
  const seq = ++view.seq.check;
  const box = $("verdict");
  box.className = "verdict verdict-pending";
  box.textContent = "Checking the setpoint…";
  setBrief("pending", "Checking the setpoint…");
  try {
    const chk = await getJSON(urls.twinOfPage(ID, state), "Checking the setpoint (steady states, margins, upsets)");
    if (seq !== view.seq.check) return;
    view.check = chk;
    renderCheck(chk);
    if (state.upset !== null && state.upset !== undefined) openUpset(state.upset, false);
  } catch (e) {
    if (seq !== view.seq.check) return;
    box.className = "verdict verdict-error";
    box.textContent = `The check could not be made: ${e.message}`;
    setBrief("error", "The check could not be made");
  }
}

// The verdict in brief beside the setpoint, in view on every screen (the full check is in its panel).
function setBrief(verdict, text) {
  const b = $("verdict-brief");
  b.className = `verdict-brief verdict-${verdict}`;
  b.dataset.verdict = verdict;
  b.firstElementChild.textContent = text;
}

function renderCheck(chk) {
  renderVerdict($("verdict"), chk);
  setBrief(chk.verdict, VERDICT_WORDS[chk.verdict] || chk.verdict);
  const legend = view.map ? view.map.legend || [] : [];
  const entry = legend.find((e) => e.key === chk.region);
  const region = entry ? `Region at the setpoint: ${entry.label}. ` : chk.region ? `Region at the setpoint: ${String(chk.region).replace(/_/g, " ")}. ` : "";
  const words = stateWords(chk);
  $("assumption").textContent = `${region}Operating state: ${words.sentence}.`;
  $("assumption").title = chk.assumption || "";
  // the state selector speaks the same words: with one steady state there is nothing to choose
  const one = (chk.states || []).length <= 1;
  $("sp-branch").hidden = one;
  $("sp-state-one").hidden = !one;
  $("sp-state-one").textContent = one ? words.short : "";
  renderList($("reasons"), chk.reasons, legend);
  renderList($("check-cautions"), chk.cautions);
  // an undetermined verdict shows only what failed: nothing computed from it is put in front of a reviewer
  const details = showsDetails(chk);
  $("check-details").hidden = !details;
  $("reasons-title").textContent = details ? "Reasons" : "What failed";
  if (!details) return;
  renderKV($("margins"), chk.margins);
  renderSafety($("safety"), $("mtsr-explained"), chk);
  renderStates($("states"), chk.states, chk.state_index);
  const policy = chk.policy || {};
  $("upsets-intro").textContent = "Each upset starts at the operating state and is simulated on its own until it "
    + `settles, stops (overflow, tank empty) or reaches its cap of ${fmtTime(policy.upset_duration_s)}; an overflow `
    + `sooner than ${fmtTime(policy.min_time_to_act_s)} (the time to act) is a reason. Open one to see its response.`;
  renderUpsets($("upsets"), chk.upsets, (i) => openUpset(i, true));
}

async function openUpset(i, push) {
  const u = (view.check && view.check.upsets || [])[i];
  if (!u) return;
  state.upset = i;
  syncURL(push);
  const box = $("upset-view");
  box.hidden = false;
  $("upset-title").textContent = `Response: ${upsetName(u, i)}`;
  const lim = view.scenario.limits || {};
  try {
    // the upset's own events, from the same operating state, for the same time: the response the check summarised
    const body = { scenario_id: ID, ...setpoint(), start: state.branch || "low", events: u.events || [] };
    // as far as the check followed it: to where it settled, or its cap (an overflow or empty tank stops by itself)
    const until = u.ending === "settled" && u.end_time_s > 0 ? u.end_time_s : u.duration_s;
    if (until) body.duration = until;
    const sim = await postJSON(urls.apiPost("simulate"), body, "Simulating the upset");
    if (state.upset !== i) return;
    await drawResponse(Plotly, $("upset-plot"), sim, { maxK: lim.max_temperature, alarmK: lim.alarm_temperature,
      heightM: view.scenario.vessel.height, levelHigh: lim.level_high, levelLow: lim.level_low, endNote: upsetEnding(u) });
  } catch (e) {
    $("upset-plot").textContent = e.message;
  }
}

// -- curves -----------------------------------------------------------------------------------------------
async function loadCurves() {
  if (!Plotly || !view.scenario) return;
  const seq = ++view.seq.curves;
  const sp = setpoint();
  const maxK = (view.scenario.limits || {}).max_temperature;
  const ranges = { residence_time: state.map_residence_time, feed_temperature: state.map_feed_temperature };
  // the plant's records of the dataset in the link go on the curves too (plant.js)
  const records = state.dataset ? plant().overlayFor().catch(() => null) : Promise.resolve(null);
  const one = async (along, node) => {
    const body = { scenario_id: ID, along, ...sp };
    if (ranges[along]) body.range = ranges[along];
    try {
      const doc = await postJSON(urls.apiPost("branch"), body, "Tracing the steady-state curves");
      const extra = (await records) ? [plant().curveTrace(along)].filter(Boolean) : [];
      if (seq === view.seq.curves) await drawBranch(Plotly, node, doc, sp, maxK, extra);
    } catch (e) { if (seq === view.seq.curves) node.textContent = `This curve could not be traced: ${e.message}`; }
  };
  const heat = async () => {
    try {
      await drawHeatBalance(Plotly, $("heat-balance"), scenarioAtSetpoint(), sp, maxK);
    } catch (e) { $("heat-balance").textContent = `The heat balance could not be drawn: ${e.message}`; }
  };
  await Promise.all([one("residence_time", $("curve-tau")), one("feed_temperature", $("curve-tin")), heat()]);
  if (seq === view.seq.curves) plant().describeCurves($("curves-plant-note"));
}

// -- simulation ---------------------------------------------------------------------------------------------
// The run lives in the URL (sim_start, sim_duration [s], sim_events: the lines as typed), so a shared link
// re-runs it; the lines go to the API as they are (POST /simulate reads the same text).
function eventLinesOf(text) {
  const out = [];
  String(text || "").split("\n").forEach((raw, i) => {
    const line = raw.trim();
    if (line && !line.startsWith("#")) out.push({ line, number: i + 1 });
  });
  return out;
}

function fillSimulationInputs() {
  if (state.sim_start) $("sim-start").value = state.sim_start;
  if (state.sim_duration !== null && state.sim_duration !== undefined) $("sim-duration").value = fmtTime(state.sim_duration, 6);
  if (state.sim_events !== null && state.sim_events !== undefined) $("sim-events").value = state.sim_events;
}

const hasSimulation = () => state.sim_duration !== null && state.sim_duration !== undefined;

async function runSimulation() {
  fieldError("sim-events-err", "");
  fieldError("sim-duration-err", "");
  const lines = eventLinesOf(state.sim_events);
  const body = { scenario_id: ID, ...setpoint(), start: state.sim_start || "low", events: lines.map((l) => l.line),
    duration: state.sim_duration };
  if (state.coolant_temperature) body.coolant_temperature = state.coolant_temperature;
  const seq = ++view.seq.sim;
  try {
    const sim = await postJSON(urls.apiPost("simulate"), body, "Simulating");
    if (seq !== view.seq.sim) return;
    view.simulation = sim;
    $("sim-summary").textContent = simulationSummary(sim);
    const lim = view.scenario.limits || {};
    await drawResponse(Plotly, $("sim-plot"), sim, { maxK: lim.max_temperature, alarmK: lim.alarm_temperature,
      heightM: view.scenario.vessel.height });
    $("sim-plot").dataset.drawn = String(Date.now());
  } catch (e) {
    if (seq !== view.seq.sim) return;
    const f = (e.fields || []);
    // the API names events[i] of the lines sent; the page names the line of the box
    const ev2 = f.filter((x) => String(x.field).startsWith("events")).map((x) => {
      const m = String(x.field).match(/^events\[(\d+)\]/);
      const l = m ? lines[Number(m[1])] : null;
      return plainText(l ? `Line ${l.number}: ${String(x.message).replace(/^events\[\d+\][^:]*:\s*/, "")}` : `${x.field}: ${x.message}`);
    });
    const du = f.filter((x) => String(x.field).startsWith("duration")).map((x) => x.message);
    if (ev2.length) fieldError("sim-events-err", ev2.join("; "));
    if (du.length) fieldError("sim-duration-err", du.join("; "));
    if (!ev2.length && !du.length) showProblem(e);
  }
}

function wireSimulation() {
  $("sim-form").addEventListener("submit", (ev) => {
    ev.preventDefault();
    let duration;
    try { duration = parseTime($("sim-duration").value, "min"); } catch (e) { fieldError("sim-duration-err", e.message.replace("residence time", "duration")); return; }
    state.sim_start = $("sim-start").value === "high" ? "high" : "low";
    state.sim_duration = duration;
    state.sim_events = $("sim-events").value.replace(/\r/g, "").trim() || null;
    syncURL(true);
    runSimulation();
  });
}

// -- plant data (plant.js) ------------------------------------------------------------------------------------
function plant() {
  if (!view.plant) view.plant = new PlantPanel({ id: ID, state: () => state, syncURL, scenario: () => view.scenario });
  return view.plant;
}

// -- editor -------------------------------------------------------------------------------------------------
function openEditor() {
  if (view.editor || !view.scenario) return;
  view.editor = new Editor($("editor"), view.scenario, {});
  $("editor").addEventListener("submit", async (ev) => {
    ev.preventDefault();
    await saveEdits();
  });
  $("editor-revert").addEventListener("click", () => view.editor.revert());
}

async function saveEdits() {
  const doc = view.editor.collect();
  view.editor.clearErrors();
  fieldError("editor-error", "");
  // a changed scenario keeps its origin's description only if the engineer says so: ask for a new one
  const original = (view.scenario.description || "").trim();
  if (original && String(doc.description || "").trim() === original) {
    const msg = "Describe the new scenario: the description of the one it was made from may no longer hold " +
      "(edit it, or type the same text again with a change).";
    const left = view.editor.showErrors([{ field: "description", message: msg }]);
    if (left.length) fieldError("editor-error", msg);
    const box = document.querySelector("#editor [data-field='description'] textarea, #editor [data-field='description'] input");
    if (box) box.focus();
    return;
  }
  const headers = {};
  const token = sessionStorage.getItem("exomap-token");
  if (token) headers.Authorization = `Bearer ${token}`;
  try {
    const saved = await postJSON(urls.apiSaveScenario(ID), doc, "Checking and saving the scenario", headers);
    const next = { ...state, panel: "check", upset: null };
    window.location.assign(urls.scenarioPage(saved.id, next));
  } catch (e) {
    if (e.status === 401) {
      const t = window.prompt("Saving on this server needs its access token:");
      if (t) { sessionStorage.setItem("exomap-token", t); return saveEdits(); }
    }
    const left = view.editor.showErrors(e.fields || []);
    const msg = left.length ? left.map((f) => `${f.field}: ${f.message}`).join("; ") : e.fields && e.fields.length
      ? "Some values need fixing; see the messages beside the fields." : e.message;
    fieldError("editor-error", msg);
  }
}

// -- copy link ----------------------------------------------------------------------------------------------
function wireCopy() {
  $("copy-link").addEventListener("click", async () => {
    const href = urls.absolute(urls.scenarioPage(ID, state));
    const lt = $("link-text");
    lt.hidden = false;
    lt.value = href;
    lt.select();
    try {
      await navigator.clipboard.writeText(href);
      $("copy-link").textContent = "Link copied";
    } catch {
      $("copy-link").textContent = "Copy the link shown";
    }
    setTimeout(() => { $("copy-link").textContent = "Copy link"; }, 2500);
  });
}

// -- start --------------------------------------------------------------------------------------------------
function refreshAll() {
  loadMap();
  loadCheck();
  if (state.panel === "curves") loadCurves();
}

async function main() {
  performance.mark("exomap:start");
  wireProblemBox();
  wireTabs();
  wireSetpoint();
  wireCopy();
  wireSimulation();
  wireMapKeys();
  wireMoveMode();
  $("verdict-brief-link").addEventListener("click", () => {
    showPanel("check");
    $("verdict").scrollIntoView({ block: "nearest" });
    $("tab-check").focus();
  });
  $("upset-close").addEventListener("click", () => { state.upset = null; $("upset-view").hidden = true; syncURL(true); });
  // the map does not depend on the scenario document: ask for it at once, while plotly's bundle compiles
  const mapAnswer = getJSON(urls.mapOfPage(ID, state), "Computing the operating map");
  mapAnswer.catch(() => {}); // reported by loadMap
  try {
    view.scenario = await getJSON(urls.apiScenario(ID), "Loading the scenario");
  } catch (e) {
    $("scenario-title").textContent = "Scenario not available";
    $("verdict").textContent = e.message;
    showProblem(e);
    return;
  }
  const sc = view.scenario;
  $("scenario-title").textContent = sc.title || "Untitled scenario";
  document.title = `${sc.title || "Scenario"} · exomap`;
  if (state.residence_time === null) state.residence_time = nominalTau(sc);
  if (state.feed_temperature === null) state.feed_temperature = sc.feed.temperature;
  fillSetpointInputs();
  fillSimulationInputs();
  syncURL(false);
  const checked = loadCheck();
  // Running plotly's bundle holds the main thread for a second or more on a slow plant PC, so the map is first
  // shown as a still picture from its answer; then the bundle runs and the interactive chart replaces it.
  try {
    const doc = await mapAnswer;
    if (!window.Plotly && drawPreview($("map"), doc, setpoint())) {
      renderLegend(doc);
      performance.mark("exomap:map-preview");
      $("map").dataset.previewMs = String(Math.round(performance.now()));
      await new Promise((r) => requestAnimationFrame(() => setTimeout(r, 0))); // let it paint
    }
  } catch { /* loadMap reports a failed map */ }
  try { Plotly = await plotlyReady(); } catch (e) { showProblem(e); return; }
  performance.mark("exomap:plotly-ready");
  showPanel(state.panel || "check", false);
  await Promise.all([loadMap(mapAnswer), checked]);
  listDemoFlag();
}

async function listDemoFlag() {
  try {
    const list = await getJSON(urls.apiScenarios(), "Listing scenarios");
    const all = list.scenarios || [];
    const me = all.find((s) => s.id === ID);
    if (me && me.demo) $("scenario-demo").hidden = false;
    const origin = me && me.derived_from ? all.find((s) => s.id === me.derived_from) : null;
    if (me && me.derived_from) {
      const box = $("scenario-derived");
      box.textContent = "· derived from ";
      box.append(el("a", { href: urls.scenarioPage(me.derived_from), text: origin ? origin.title || origin.id : me.derived_from }));
      // lineage: what the change did, side by side with the scenario it was made from
      box.append(" · ", el("a", { id: "compare-original", href: urls.comparePage({ a: me.derived_from, b: ID }),
        text: "Compare with the original" }));
      box.hidden = false;
    }
  } catch { /* the demo note is a nicety */ }
}

main();
