// The print view: a review sheet of one setpoint (summary, map, check, upsets, cautions) for A4 or Letter.

import * as urls from "./urls.js";
import { getJSON, showProblem, wireProblemBox, boot, plotlyReady } from "./api.js";
import { drawMap, renderMapLegend } from "./map.js";
import { renderVerdict, renderList, renderKV, renderStates, renderUpsets, el, stateWords, renderSafety, showsDetails } from "./check.js";
import { fmtMin, fmtTemp, fmtNum, fmtFlow, fmtTime, clean, plainText } from "./units.js";

const $ = (id) => document.getElementById(id);
const ID = boot().scenario_id;
const state = urls.readState();

const volume = (doc) => (Math.PI * doc.vessel.diameter ** 2 / 4) * doc.vessel.level_setpoint;
const nominalTau = (doc) => clean(volume(doc) / doc.feed.flow);

// The sign-off fields: typed here, written into this page's link (replaceState), never sent to the server.
function wireSignoff() {
  for (const k of urls.SIGNOFF_KEYS) {
    const input = $(`p-${k}`);
    input.value = state[k] || "";
    input.addEventListener("input", () => {
      state[k] = input.value.trim() || null;
      history.replaceState(null, "", urls.printPage(ID, state));
    });
  }
}

// Every figure of the sheet belongs to the setpoint: the feed row gives the flow and temperature at the setpoint
// (V/tau at the level setpoint), and names the scenario's nominal feed beside it.
function summaryRows(sc, sp) {
  const r = [];
  const q = (v, f) => (typeof v === "number" ? f(v) : v === null || v === undefined ? "—" : String(v));
  r.push(["Title", sc.title || "—"], ["Description", plainText(sc.description || "—")], ["Species", (sc.species || []).join(", ")]);
  r.push(["Vessel", `diameter ${q(sc.vessel.diameter, (v) => `${fmtNum(v)} m`)}, height ${q(sc.vessel.height, (v) => `${fmtNum(v)} m`)}, level setpoint ${q(sc.vessel.level_setpoint, (v) => `${fmtNum(v)} m`)}`]);
  const v = sc.outlet_valve || {};
  r.push(["Outlet valve", `Kv ${fmtNum(v.kv)} m³/h, ${String(v.characteristic || "").replace(/_/g, " ")}` +
    (v.level_control ? `, level controller gain ${fmtNum(v.level_control.gain)} 1/m, reset ${fmtNum(v.level_control.reset_time)} s`
      : typeof v.opening === "number" ? `, fixed at ${(100 * v.opening).toFixed(0)} % open` : "")]);
  r.push(["Liquid", `density ${fmtNum(sc.liquid.density)} kg/m³, heat capacity ${fmtNum(sc.liquid.heat_capacity / 1000)} kJ/(kg·K)`]);
  (sc.reactions || []).forEach((x, j) => {
    const side = (sign) => Object.entries(x.stoichiometry || {}).filter(([, n]) => sign * n > 0)
      .map(([s, n]) => `${Math.abs(n) === 1 ? "" : Math.abs(n) + " "}${s}`).join(" + ") || "0";
    const n = Object.values(x.orders || {}).reduce((a, b) => a + b, 0);
    const k0unit = n === 0 ? "mol/(m³·s)" : n === 1 ? "1/s" : n === 2 ? "m³/(mol·s)" : `(mol/m³)^(1−${n})/s`;
    r.push([`Reaction ${j + 1}${x.label ? " (" + x.label + ")" : ""}`, `${side(-1)} → ${side(1)}; k0 ${x.pre_exponential.toExponential(3)} ${k0unit}, ` +
      `Ea ${fmtNum(x.activation_energy / 1000)} kJ/mol, ΔH ${fmtNum(x.reaction_enthalpy / 1000)} kJ/mol`]);
  });
  const f = sc.feed;
  const qsp = volume(sc) / sp.residence_time;
  r.push(["Feed at the setpoint", `${fmtFlow(qsp)} at ${fmtTemp(sp.feed_temperature)}; ` +
    Object.entries(f.concentrations || {}).map(([s, c]) => `${s} ${fmtNum(c / 1000)} mol/L`).join(", ") +
    ` (the scenario's nominal feed: ${fmtFlow(f.flow)} at ${fmtTemp(f.temperature)})`]);
  const Tc = sp.coolant_temperature ?? (sc.jacket ? sc.jacket.coolant_temperature : null);
  r.push(["Cooling jacket", sc.jacket ? `UA ${fmtNum(sc.jacket.ua / 1000)} kW/K, coolant ${fmtTemp(Tc)}` : "none (adiabatic apart from losses)"]);
  r.push(["Heat loss", sc.heat_loss ? `UA ${fmtNum(sc.heat_loss.ua)} W/K to ${fmtTemp(sc.heat_loss.ambient_temperature)}` : "none"]);
  const l = sc.limits || {};
  r.push(["Limits", `maximum ${fmtTemp(l.max_temperature)}` + (l.alarm_temperature ? `, alarm ${fmtTemp(l.alarm_temperature)}` : "") +
    (l.technical_limit_temperature ? `, MTT ${fmtTemp(l.technical_limit_temperature)}` : "")]);
  return r;
}

function table(node, rows) {
  node.textContent = "";
  for (const [k, v] of rows) node.append(el("tr", {}, el("th", { scope: "row", text: k }), el("td", { text: v })));
}

// "Derived from" the scenario this one was saved from (store metadata), so a reviewer sees the lineage.
async function derivedFrom() {
  try {
    const all = (await getJSON(urls.apiScenarios(), "Listing scenarios")).scenarios || [];
    const me = all.find((s) => s.id === ID);
    if (!me || !me.derived_from) return;
    const origin = all.find((s) => s.id === me.derived_from);
    $("p-derived").textContent = `Derived from ${origin ? `“${origin.title}” ` : ""}(scenario id ${me.derived_from}).`;
    $("p-derived").hidden = false;
  } catch { /* the lineage line is a nicety */ }
}

async function main() {
  wireProblemBox();
  wireSignoff();
  $("p-date").textContent = new Date().toISOString().slice(0, 16).replace("T", " ") + " UTC";
  $("p-print").addEventListener("click", () => window.print());
  try {
    const sc = await getJSON(urls.apiScenario(ID), "Loading the scenario");
    $("p-title").textContent = `Setpoint review: ${sc.title || "untitled scenario"}`;
    document.title = `Review: ${sc.title || ID} · exomap`;
    const sp = {
      residence_time: state.residence_time ?? nominalTau(sc),
      feed_temperature: state.feed_temperature ?? sc.feed.temperature,
      coolant_temperature: state.coolant_temperature ?? null,
    };
    const full = { ...state, ...sp };
    table($("p-summary"), summaryRows(sc, sp));
    derivedFrom();
    const [Plotly, map, chk] = await Promise.all([plotlyReady(), getJSON(urls.mapOfPage(ID, full), "Computing the map"),
      getJSON(urls.twinOfPage(ID, full), "Checking the setpoint")]);
    const q = volume(sc) / sp.residence_time;
    const rows = [["Residence time", fmtMin(sp.residence_time, 5)],
      ["Feed flow", `${fmtFlow(q)} (${Math.round(100 * q / sc.feed.flow)} % of the scenario's nominal ${fmtFlow(sc.feed.flow)})`],
      ["Feed temperature", fmtTemp(sp.feed_temperature)]];
    if (sc.jacket) rows.push(["Coolant temperature", fmtTemp(sp.coolant_temperature ?? sc.jacket.coolant_temperature)]);
    const words = stateWords(chk);
    rows.push(["Operating state", words.sentence]);
    table($("p-setpoint"), rows);
    renderVerdict($("p-verdict"), chk);
    renderList($("p-reasons"), chk.reasons, map.legend);
    // undetermined: only what failed is printed (DESIGN.md §6)
    for (const node of document.querySelectorAll(".check-detail")) node.hidden = !showsDetails(chk);
    renderKV($("p-margins"), chk.margins);
    renderSafety($("p-safety"), $("p-mtsr"), chk);
    renderStates($("p-states"), chk.states, chk.state_index);
    const entry = (map.legend || []).find((e) => e.key === chk.region);
    $("p-assumption").textContent = `Region at the setpoint: ${entry ? entry.label : String(chk.region).replace(/_/g, " ")}.`;
    renderUpsets($("p-upsets"), chk.upsets, null);
    const pol = chk.policy || {};
    $("p-upsets-intro").textContent = "Each upset starts at the operating state and runs until it settles, stops "
      + `(overflow, tank empty) or reaches its cap of ${fmtTime(pol.upset_duration_s)}; every alarm is listed with its time `
      + `after the upset. An overflow sooner than ${fmtTime(pol.min_time_to_act_s)} (the time to act) is a reason.`;
    // page 1 holds the setpoint, the reasons and the map: a long list of reasons takes its room from the map
    // (measured on screen, where the sheet is narrower than on paper, so the estimate errs on the safe side)
    const extra = $("p-reasons").getBoundingClientRect().height - 170;
    if (extra > 0) $("p-map").style.height = `${Math.max(45, 70 - extra / (96 / 25.4)).toFixed(1)}mm`;
    await drawMap(Plotly, $("p-map"), map, sp, { staticPlot: true });
    renderMapLegend($("p-legend"), map);
    document.body.dataset.ready = "1";
  } catch (e) {
    showProblem(e);
    $("p-verdict").textContent = `The review sheet could not be made: ${e.message}`;
  }
}

main();
