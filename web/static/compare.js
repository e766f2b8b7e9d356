// The compare page and its print sheet: before (A) and after (B) a change. Both draw from one answer of the
// JSON API (GET /api/v1/compare, the page's twin); the view state, sign-off fields included, is the link.

import * as urls from "./urls.js";
import { getJSON, showProblem, wireProblemBox, boot, plotlyReady } from "./api.js";
import { drawMap, legendEntries, layout, segments, chain } from "./map.js";
import { renderVerdict, renderList, el } from "./check.js";
import { fmtMin, fmtTemp, fmtNum, parseTime, parseTemperature, toMin, toC } from "./units.js";

const $ = (id) => document.getElementById(id);
const PAGE = boot().page;

// Colours of our own for the change map, apart in lightness as well as hue (so they read in greyscale):
// unchanged very light grey, became better a mid green-grey, became worse a dark red-brown.
export const CHANGE = [
  { key: "same", label: "region unchanged", colour: "#f2f2f2" },
  { key: "better", label: "became better (less severe region in B)", colour: "#8fb39a" },
  { key: "worse", label: "became worse (more severe region in B)", colour: "#6b1d1d" },
];

function sideText(ans, s) {
  const sp = ans[`setpoint_${s}`];
  return `residence time ${fmtMin(sp.residence_time_s, 4)} (flow ${fmtNum(sp.flow_m3_per_s * 3600, 4)} m³/h), ` +
    `feed ${fmtTemp(sp.feed_temperature_K)}`;
}

function fieldsTable(table, ans) {
  table.textContent = "";
  table.append(el("tr", {}, ...["Field", "Change", "A", "B", "Relative change"].map((h) => el("th", { scope: "col", text: h }))));
  if (ans.same_scenario) {
    table.append(el("tr", {}, el("td", { colspan: "5", text: "The same scenario on both sides: only the setpoints differ." })));
    return;
  }
  if (!ans.fields.length) table.append(el("tr", {}, el("td", { colspan: "5", text: "No field differs." })));
  for (const d of ans.fields) {
    const rel = d.relative_change === null || d.relative_change === undefined ? "—"
      : `${d.relative_change >= 0 ? "+" : ""}${(100 * d.relative_change).toFixed(1)} %`;
    const long = (t) => (t.length > 90 ? t.slice(0, 87) + "…" : t);
    table.append(el("tr", { "data-field": d.field }, el("th", { scope: "row", text: d.field }), el("td", { text: d.change }),
      el("td", { text: long(d.a_text), title: String(d.a ?? "") }), el("td", { text: long(d.b_text), title: String(d.b ?? "") }),
      el("td", { class: "num", text: rel })));
  }
}

function transitionsTable(table, m) {
  table.textContent = "";
  const label = new Map((m.legend || []).map((e) => [e.key, e.key]));
  table.append(el("tr", {}, ...["From (A)", "To (B)", "Cells", "Share of the map", "Direction"].map((h) => el("th", { scope: "col", text: h }))));
  const order = new Map((m.legend || []).map((e) => [e.key, e.code]));
  for (const t of m.transitions) {
    const worse = order.get(t.to) > order.get(t.from);
    table.append(el("tr", { class: worse ? "change-worse" : "" }, el("td", { text: label.get(t.from) }), el("td", { text: label.get(t.to) }),
      el("td", { class: "num", text: String(t.cells) }), el("td", { class: "num", text: `${(100 * t.cells / m.cells).toFixed(1)} %` }),
      el("td", { text: worse ? "worse" : "better" })));
  }
  if (!m.transitions.length) table.append(el("tr", {}, el("td", { colspan: "5", text: "No cell changed region." })));
}

function summaryText(m) {
  return `${m.changed_count} of ${m.cells} cells changed region: ${m.worse_count} became worse, ${m.better_count} became better.`;
}

// One side of the answer shaped as a map answer, so the scenario page's map drawing serves it unchanged.
function sideMap(m, s) {
  return {
    residence_time_s: m.residence_time_s, feed_temperature_K: m.feed_temperature_K, spacing: m.spacing,
    legend: m.legend, region: m[`region_${s}`], state_count: m[`state_count_${s}`],
    valve_limited: m[`valve_limited_${s}`], boundaries: m[`boundaries_${s}`],
  };
}

function spOf(ans, s) {
  const sp = ans[`setpoint_${s}`];
  return { residence_time: sp.residence_time_s, feed_temperature: sp.feed_temperature_K };
}

export function changeTraces(ans) {
  const m = ans.map;
  const x = m.residence_time_s.map(toMin), y = m.feed_temperature_K.map(toC);
  const z = m.direction.map((row) => row.map((d) => (d > 0 ? 2 : d < 0 ? 1 : 0)));
  const scale = [];
  CHANGE.forEach((c, i) => { scale.push([i / 3, c.colour], [(i + 1) / 3, c.colour]); });
  const out = [{ type: "heatmap", name: "changes", x, y, z, zmin: -0.5, zmax: 2.5, colorscale: scale, showscale: false,
    hoverinfo: "skip", zsmooth: false }];
  const logx = m.spacing === "log";
  for (const [s, dash, colour] of [["a", "dot", "#555555"], ["b", "solid", "#111111"]]) {
    for (const key of ["ignition", "extinction", "hopf", "max_temperature"]) {
      for (const seg of segments(m[`boundaries_${s}`][key] || [])) {
        for (const pts of chain(seg, logx)) {
          out.push({ type: "scatter", mode: "lines", name: `boundary:${s}:${key}`, hoverinfo: "skip",
            x: pts.map((p) => toMin(p[0])), y: pts.map((p) => toC(p[1])),
            line: { color: key === "max_temperature" ? "#b00020" : colour, width: s === "b" ? 2.2 : 1.6,
              dash: key === "extinction" ? (s === "b" ? "dash" : "dashdot") : dash } });
        }
      }
    }
  }
  for (const [s, symbol] of [["a", "circle-open"], ["b", "x-thin-open"]]) {
    const sp = spOf(ans, s);
    out.push({ type: "scatter", mode: "markers", name: `setpoint:${s}`, hoverinfo: "skip", cliponaxis: false,
      x: [toMin(sp.residence_time)], y: [toC(sp.feed_temperature)],
      marker: { symbol, size: 15, color: "#000", line: { width: 3, color: "#000" } } });
  }
  return out;
}

function changeLegend(ul) {
  ul.textContent = "";
  for (const c of CHANGE) ul.append(el("li", {}, el("span", { class: "swatch", style: `background:${c.colour}` }), el("span", { text: c.label })));
  ul.append(el("li", { text: "lines: A's boundaries thin and dotted, B's bold (ignition solid, extinction dashed); maximum temperature in red; ○ A's setpoint, ✕ B's" }));
}

async function drawChange(Plotly, node, ans, height) {
  const lay = layout(sideMap(ans.map, "a"), { height });
  await Plotly.react(node, changeTraces(ans), lay, { displayModeBar: false, responsive: true, staticPlot: true });
}

// -- the compare page -----------------------------------------------------------------------------------
async function fillChoices(state) {
  let list = [];
  try {
    list = (await getJSON(urls.apiScenarios(), "Listing scenarios")).scenarios || [];
  } catch (e) { showProblem(e); }
  for (const s of ["a", "b"]) {
    const sel = $(`cmp-${s}`);
    sel.textContent = "";
    sel.append(el("option", { value: "", text: "— choose a scenario —" }));
    const known = new Set();
    for (const sc of list) {
      known.add(sc.id);
      sel.append(el("option", { value: sc.id, text: `${sc.title || sc.name || sc.id}${sc.demo ? " (demo)" : ""}` }));
    }
    const want = state[s];
    if (want && !known.has(want)) sel.append(el("option", { value: want, text: want }));
    sel.value = want || "";
  }
}

function formState() {
  const st = {};
  const err = $("cmp-form-error");
  err.hidden = true;
  st.a = $("cmp-a").value || undefined;
  st.b = $("cmp-b").value || undefined;
  for (const s of ["a", "b"]) {
    const tau = $(`cmp-tau-${s}`).value.trim(), tin = $(`cmp-tin-${s}`).value.trim();
    try {
      if (tau) st[`residence_time_${s}`] = Number(parseTime(tau).toPrecision(12));
      if (tin) st[`feed_temperature_${s}`] = Number(parseTemperature(tin).toPrecision(12));
    } catch (e) {
      err.textContent = `${s.toUpperCase()}: ${e.message}`;
      err.hidden = false;
      return null;
    }
  }
  for (const [id, k] of [["cmp-prepared", "prepared_by"], ["cmp-reviewed", "reviewed_by"], ["cmp-ref", "change_reference"], ["cmp-date", "review_date"]]) {
    const v = $(id).value.trim();
    if (v) st[k] = v;
  }
  const keep = urls.readCompareState();
  for (const k of ["branch_a", "branch_b", "map_residence_time", "map_feed_temperature", "points"]) if (keep[k]) st[k] = keep[k];
  return st;
}

function fillForm(state) {
  for (const s of ["a", "b"]) {
    const tau = state[`residence_time_${s}`], tin = state[`feed_temperature_${s}`];
    $(`cmp-tau-${s}`).value = Number.isFinite(tau) ? `${Number((tau / 60).toPrecision(6))} min` : "";
    $(`cmp-tin-${s}`).value = Number.isFinite(tin) ? `${Number((tin - 273.15).toPrecision(6))} °C` : "";
  }
  $("cmp-prepared").value = state.prepared_by || "";
  $("cmp-reviewed").value = state.reviewed_by || "";
  $("cmp-ref").value = state.change_reference || "";
  $("cmp-date").value = state.review_date || "";
}

async function comparePage() {
  const state = urls.readCompareState();
  await fillChoices(state);
  fillForm(state);
  $("cmp-print").href = urls.comparePrintPage(state);
  $("cmp-form").addEventListener("submit", (ev) => {
    ev.preventDefault();
    const st = formState();
    if (!st) return;
    if (!st.a || !st.b) {
      $("cmp-form-error").textContent = "Choose a scenario for A and for B (the same one twice compares two setpoints).";
      $("cmp-form-error").hidden = false;
      return;
    }
    window.location.assign(urls.comparePage(st));
  });
  for (const id of ["cmp-prepared", "cmp-reviewed", "cmp-ref", "cmp-date"]) {
    $(id).addEventListener("change", () => {
      const st = formState();
      if (!st) return;
      history.replaceState(null, "", urls.comparePage(st));
      $("cmp-print").href = urls.comparePrintPage(st);
    });
  }
  $("cmp-copy").addEventListener("click", async () => {
    const link = urls.absolute(window.location.pathname + window.location.search);
    try { await navigator.clipboard.writeText(link); $("cmp-copy").textContent = "Link copied"; }
    catch { window.prompt("Copy this link:", link); }
  });
  if (!state.a || !state.b) { document.body.dataset.ready = "1"; return; }
  $("cmp-results").hidden = false;
  try {
    const [Plotly, ans] = await Promise.all([plotlyReady(), getJSON(urls.apiCompare(state), "Computing both maps and both checks")]);
    $("json-twin").href = urls.apiCompare(state);
    for (const s of ["a", "b"]) {
      $(`cmp-title-${s}`).textContent = ans[s].title || ans[s].scenario_id;
      $(`cmp-sp-${s}`).textContent = sideText(ans, s);
      if (ans.checks) {
        renderVerdict($(`cmp-verdict-${s}`), ans.checks[s]);
        renderList($(`cmp-reasons-${s}`), ans.checks[s].reasons);
      }
    }
    fieldsTable($("cmp-fields"), ans);
    $("cmp-summary").textContent = summaryText(ans.map);
    transitionsTable($("cmp-transitions"), ans.map);
    changeLegend($("cmp-legend"));
    await drawChange(Plotly, $("cmp-map"), ans, 420);
    for (const s of ["a", "b"]) await drawMap(Plotly, $(`cmp-map-${s}`), sideMap(ans.map, s), spOf(ans, s), { staticPlot: true, height: 300 });
    const ul = $("cmp-region-legend");
    ul.textContent = "";
    for (const e of legendEntries(ans.map)) ul.append(el("li", {}, el("span", { class: "swatch", style: `background:${e.colour}` }), el("span", { text: `${e.key}: ${e.label}` })));
    document.body.dataset.ready = "1";
  } catch (e) {
    showProblem(e);
    for (const s of ["a", "b"]) $(`cmp-verdict-${s}`).textContent = `Not computed: ${e.message}`;
    document.body.dataset.ready = "1";
  }
}

// -- the print sheet ------------------------------------------------------------------------------------
async function printSheet() {
  const state = urls.readCompareState();
  $("cp-date").textContent = new Date().toISOString().slice(0, 16).replace("T", " ") + " UTC";
  $("cp-print").addEventListener("click", () => window.print());
  try {
    const [Plotly, ans] = await Promise.all([plotlyReady(), getJSON(urls.apiCompare(state), "Computing both maps and both checks")]);
    $("cp-title").textContent = `Change review: ${ans.a.title || ans.a.scenario_id}` + (ans.same_scenario ? " (two setpoints)" : ` → ${ans.b.title || ans.b.scenario_id}`);
    const sides = $("cp-sides");
    sides.textContent = "";
    sides.append(el("tr", {}, ...["", "Scenario", "Id", "Setpoint", "Verdict"].map((h) => el("th", { scope: "col", text: h }))));
    for (const s of ["a", "b"]) {
      sides.append(el("tr", {}, el("th", { scope: "row", text: s === "a" ? "A (before)" : "B (after)" }), el("td", { text: ans[s].title || "—" }),
        el("td", {}, el("code", { text: ans[s].scenario_id })), el("td", { text: sideText(ans, s) }),
        el("td", { text: ans.checks ? ans.checks[s].verdict : "not checked" })));
      if (ans.checks) {
        renderVerdict($(`cp-verdict-${s}`), ans.checks[s]);
        renderList($(`cp-reasons-${s}`), ans.checks[s].reasons);
      }
    }
    fieldsTable($("cp-fields"), ans);
    $("cp-summary").textContent = summaryText(ans.map);
    transitionsTable($("cp-transitions"), ans.map);
    changeLegend($("cp-legend"));
    await drawChange(Plotly, $("cp-map"), ans, 360);
    document.body.dataset.ready = "1";
  } catch (e) {
    showProblem(e);
    $("cp-summary").textContent = `The review sheet could not be made: ${e.message}`;
    document.body.dataset.ready = "1";
  }
}

wireProblemBox();
if (PAGE === "compare_print") printSheet(); else comparePage();
