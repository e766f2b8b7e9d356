// The "Plant data" panel of the scenario page (DESIGN.md §12): load a historian export (CSV), map its columns to
// roles with their units, then show what was read, the plant's path on the operating map, a replay of the
// scenario on the recorded inputs, and a calibration whose result can be saved as a new scenario. The dataset id
// travels in the page link (view state key "dataset"), so a shared link opens the same data; a window of its
// records (keys "data_start", "data_end", as typed) travels with it and limits the path, the replay and the fit.

import * as urls from "./urls.js";
import { getJSON, postJSON, plotlyReady, ApiError } from "./api.js";
import { el } from "./check.js";
import { fmtTemp, parseTemperature, toC, toMin } from "./units.js";
import { setExtraTraces } from "./map.js";

const $ = (id) => document.getElementById(id);
const ROLES = ["feed_flow", "feed_temperature", "coolant_temperature", "reactor_temperature", "level",
  "valve_opening", "outlet_flow"];
const ROLE_WORDS = {
  time: "time", feed_flow: "feed flow", feed_temperature: "feed temperature",
  coolant_temperature: "coolant temperature", reactor_temperature: "reactor temperature", level: "level",
  valve_opening: "outlet valve opening", outlet_flow: "outlet flow",
};
// A sequential colour of our own for time along the plant's path: light sand to dark blue-black, lightness
// falling evenly so early and late read apart in greyscale too.
// More records than one replay of the whole is likely to finish in the server's time allowance (about a
// millisecond of computing per record of a noisy 20-s record, measured on this machine under load): a dataset
// this long is not replayed on opening, the user chooses a window first.
export const LONG_RECORDS = 20000;

export const TIME_SCALE = [[0, "#f3e3b3"], [0.35, "#c9a25a"], [0.7, "#4f6d8a"], [1, "#101c2c"]];

const api = {
  datasets: (q) => `${urls.API}/datasets` + q,
  dataset: (id) => `${urls.API}/datasets/${encodeURIComponent(id)}`,
  replay: () => `${urls.API}/replay`,
  overlay: () => `${urls.API}/overlay`,
  calibrate: () => `${urls.API}/calibrate`,
};

function guessRole(name) {
  const n = name.toLowerCase();
  if (/^(time|timestamp|date|datetime|t)$/.test(n)) return "time";
  return "";
}

// "TI-201 [degC]" -> {tag: "TI-201", unit: "degC"}
export function splitHeader(h) {
  const m = /^(.*?)\s*\[([^\]]*)\]\s*$/.exec(h.trim());
  return m ? { tag: m[1].trim(), unit: m[2].trim() } : { tag: h.trim(), unit: "" };
}

// Split one CSV line on commas outside double quotes ("" inside quotes is a quote).
function splitLine(line) {
  const out = [];
  let cur = "", quoted = false;
  for (let i = 0; i < line.length; i++) {
    const ch = line[i];
    if (ch === '"') {
      if (quoted && line[i + 1] === '"') { cur += '"'; i++; } else quoted = !quoted;
    } else if (ch === "," && !quoted) { out.push(cur); cur = ""; } else cur += ch;
  }
  out.push(cur);
  return out.map((s) => s.trim());
}

function firstLine(text) {
  const line = text.replace(/^\uFEFF/, "").split(/\r?\n/, 1)[0] || "";
  return splitLine(line).filter((s) => s !== "");
}

// The layout of an export (DESIGN.md §12), told apart the way the server does: a header with tag, time and
// value columns is the long layout (one row per sample of one tag), anything else is wide.
export function isLong(header) {
  const lower = new Set(header.map((h) => h.toLowerCase()));
  return lower.has("tag") && lower.has("time") && lower.has("value");
}

// The distinct tags of a long-layout file, in order of first appearance (at most `limit`).
export function longTags(text, header, limit = 200) {
  const col = header.findIndex((h) => h.toLowerCase() === "tag");
  const seen = new Set();
  const lines = text.replace(/^\uFEFF/, "").split(/\r?\n/);
  for (let k = 1; k < lines.length && seen.size < limit; k++) {
    if (!lines[k].trim()) continue;
    const tag = splitLine(lines[k])[col];
    if (tag) seen.add(tag);
  }
  return [...seen];
}

const authHeaders = () => {
  const token = sessionStorage.getItem("exomap-token");
  return token ? { Authorization: `Bearer ${token}` } : {};
};

function showError(id, e) {
  const n = $(id);
  n.textContent = e ? (e.message || String(e)) : "";
  n.hidden = !e;
}

const hours = (s) => (s >= 7200 ? `${(s / 3600).toFixed(2)} h` : `${(s / 60).toFixed(1)} min`);
const step = (s) => (s >= 120 ? `${(s / 60).toFixed(2)} min` : `${Number(s.toFixed(2))} s`);

// The SI unit of a reaction's rate constant from its overall order n: 1/s, or (m^3/mol)^(n-1)/s.
export function rateConstantUnit(reaction) {
  const n = Object.values((reaction && reaction.orders) || {}).reduce((a, b) => a + Number(b), 0);
  if (!Number.isFinite(n)) return null;
  if (Math.abs(n - 1) < 1e-12) return "1/s";
  return `(m³/mol)^${Number((n - 1).toPrecision(6))}/s`;
}

// Display of a fitted value in plant units; SI for the rest (the unit is named).
function inPlantUnits(value, unit) {
  if (!Number.isFinite(value)) return "—";
  if (unit === "W/K") return `${Number((value / 1000).toPrecision(4))} kW/K`;
  if (unit === "J/mol") return `${Number((value / 1000).toPrecision(4))} kJ/mol`;
  return `${Number(value.toPrecision(4))} ${unit}`;
}

const TARGET_WORDS = {
  rate_constant: "rate constant at the reference temperature", activation_energy: "activation energy",
  reaction_enthalpy: "reaction enthalpy", "jacket.ua": "jacket heat transfer UA", "heat_loss.ua": "heat loss UA",
};

function targetWords(t, doc) {
  const m = /^reactions\[(\d+)\]\.(.+)$/.exec(t);
  if (m) {
    const r = doc && doc.reactions && doc.reactions[Number(m[1])];
    return `${TARGET_WORDS[m[2]] || m[2]} of ${r && r.label ? r.label : `reaction ${Number(m[1]) + 1}`}`;
  }
  return TARGET_WORDS[t] || t;
}

export function targetsOf(doc) {
  const out = [];
  (doc.reactions || []).forEach((_, i) => {
    for (const p of ["rate_constant", "activation_energy", "reaction_enthalpy"]) out.push(`reactions[${i}].${p}`);
  });
  if (doc.jacket) out.push("jacket.ua");
  if (doc.heat_loss) out.push("heat_loss.ua");
  return out;
}

// How a long dataset was thinned for drawing (the overlay answers every stride-th record).
const thinned = (ov) => (ov.stride > 1 ? ` (every ${ov.stride}th of ${ov.records} records)` : "");

// Plant records on a steady-state curve: x the recorded residence time [min] or feed temperature [°C], y the
// recorded reactor temperature [°C], colour the time from the first record [min] (the map path's scale).
export function curvePoints(ov, along) {
  const xsRaw = along === "residence_time" ? ov.residence_time_s : ov.feed_temperature_K;
  const xOf = along === "residence_time" ? toMin : toC;
  const keep = ov.time_s.map((_, i) => Number.isFinite(xsRaw[i]) && Number.isFinite(ov.reactor_temperature_K[i]));
  const pick = (a, f) => a.filter((_, i) => keep[i]).map(f);
  const t = pick(ov.time_s, toMin);
  if (!t.length) return null;
  const other = along === "residence_time" ? pick(ov.feed_temperature_K, (v) => (v === null ? NaN : toC(v)))
    : pick(ov.residence_time_s, (v) => (v === null ? NaN : toMin(v)));
  return {
    type: "scatter", mode: "markers", name: "plant records (colour: time)", x: pick(xsRaw, xOf),
    y: pick(ov.reactor_temperature_K, toC), customdata: t.map((v, i) => [v, other[i]]),
    hovertemplate: (along === "residence_time"
      ? "τ %{x:.3g} min, T %{y:.1f} °C<br>at %{customdata[0]:.0f} min, feed %{customdata[1]:.1f} °C"
      : "feed %{x:.1f} °C, T %{y:.1f} °C<br>at %{customdata[0]:.0f} min, τ %{customdata[1]:.3g} min")
      + "<extra>plant</extra>",
    marker: { size: 6, color: t, colorscale: TIME_SCALE, cmin: t[0], cmax: t[t.length - 1] || 1,
      line: { color: "#101c2c", width: 0.6 }, showscale: true,
      colorbar: { title: { text: "time [min]", side: "top", font: { size: 11 } }, thickness: 8, len: 1, x: 1.01,
        xanchor: "left", y: 0.5, yanchor: "middle", nticks: 4, tickfont: { size: 10 }, outlinewidth: 0 } },
  };
}

export class PlantPanel {
  // ctx: { id, state(), syncURL(push), scenario() }
  constructor(ctx) {
    this.ctx = ctx;
    this.text = null;
    this.header = [];
    this.dataset = null;
    this.overlay = null;
    this.calibration = null;
    this.wired = false;
    this.seq = 0;
  }

  open() {
    if (!this.wired) this.wire();
    const id = this.ctx.state().dataset;
    if (id && (!this.dataset || this.dataset.dataset_id !== id)) this.load(id);
  }

  wire() {
    this.wired = true;
    $("plant-file").addEventListener("change", (ev) => { const f = ev.target.files[0]; if (f) this.readFile(f); });
    $("plant-upload").addEventListener("click", () => this.upload());
    $("plant-calibrate").addEventListener("submit", (ev) => { ev.preventDefault(); this.calibrate(); });
    $("plant-save").addEventListener("click", () => this.save());
    $("plant-window").addEventListener("submit", (ev) => { ev.preventDefault(); this.applyWindow(); });
    $("plant-window-all").addEventListener("click", () => {
      if (!this.dataset) return;
      $("plant-start").value = this.dataset.start;
      $("plant-end").value = this.dataset.end;
      this.applyWindow();
    });
    const doc = this.ctx.scenario();
    const box = $("plant-targets");
    box.textContent = "";
    for (const t of targetsOf(doc || {})) {
      const id = `plant-t-${t.replace(/[^a-z0-9]+/gi, "-")}`;
      box.append(el("div", { class: "check-row" },
        el("input", { type: "checkbox", id, value: t, "data-target": t }),
        el("label", { for: id }, `${targetWords(t, doc)} `, el("code", { class: "small", text: t }))));
    }
  }

  async readFile(file) {
    showError("plant-error", null);
    $("plant-fields").textContent = "";
    this.text = await file.text();
    this.header = firstLine(this.text);
    this.layout = isLong(this.header) ? "long" : "wide";
    // what is mapped: the header's columns (wide) or the tags found in the tag column (long)
    const labels = this.layout === "long" ? longTags(this.text, this.header) : this.header;
    this.columns = labels.map((label) => ({ label, ...splitHeader(label) }));
    const body = $("plant-columns").querySelector("tbody");
    body.textContent = "";
    const doc = this.ctx.scenario() || {};
    const feedSpecies = Object.keys((doc.feed && doc.feed.concentrations) || {});
    const roles = [...ROLES, ...feedSpecies.map((s) => `feed_concentration.${s}`)];
    const what = this.layout === "long" ? "tag" : "column";
    $("plant-columns-what").textContent = this.layout === "long" ? "Tag" : "Column";
    $("plant-columns-caption").textContent = this.layout === "long"
      ? `Long layout (tag, time, value${this.header.some((h) => h.toLowerCase() === "quality") ? ", quality" : ""}): `
        + `${this.columns.length} tags found. What each tag is, with its unit; leave a tag "not used" to skip it.`
      : 'What each column is. Leave a column "not used" to skip it.';
    $("plant-columns").dataset.layout = this.layout;
    this.columns.forEach(({ label, tag, unit }, i) => {
      const sel = el("select", { id: `plant-role-${i}`, "data-tag": tag, "aria-label": `Role of ${what} ${tag}` });
      sel.append(el("option", { value: "", text: "not used" }));
      if (this.layout === "wide") sel.append(el("option", { value: "time", text: "time" }));
      for (const r of roles) {
        sel.append(el("option", { value: r, text: ROLE_WORDS[r] || `feed concentration of ${r.split(".")[1]}` }));
      }
      sel.value = this.layout === "wide" ? guessRole(tag) : "";
      const u = el("input", { type: "text", id: `plant-unit-${i}`, value: unit, "data-header-unit": unit,
        "aria-label": `Unit of ${what} ${tag}`, placeholder: "e.g. degC, m^3/h" });
      body.append(el("tr", { "data-tag": tag }, el("th", { scope: "row" }, el("code", { text: label })),
        el("td", {}, sel), el("td", {}, u)));
    });
    const any = this.columns.length > 0;
    $("plant-columns").hidden = !any;
    $("plant-upload").hidden = !any;
    if (!this.header.length) showError("plant-error", new Error(`${file.name}: no header line was found.`));
    else if (!any) showError("plant-error", new Error(`${file.name}: the tag column holds no tags.`));
  }

  mappingQuery() {
    const map = [], unit = [];
    let time = null;
    this.columns.forEach(({ label, tag, unit: headerUnit }, i) => {
      const role = $(`plant-role-${i}`).value;
      const u = $(`plant-unit-${i}`).value.trim();
      if (role === "time") time = label;
      else if (role) {
        map.push(`${tag}=${role}`);
        if (u && u !== headerUnit) unit.push(`${tag}=${u}`);
      }
    });
    const parts = [`map=${encodeURIComponent(map.join(","))}`];
    if (unit.length) parts.push(`unit=${encodeURIComponent(unit.join(","))}`);
    if (time) parts.push(`time_column=${encodeURIComponent(splitHeader(time).tag)}`);
    return { query: "?" + parts.join("&"), roles: map.length };
  }

  async upload() {
    showError("plant-error", null);
    $("plant-fields").textContent = "";
    const { query, roles } = this.mappingQuery();
    if (!roles) {
      showError("plant-error", new Error(`Choose a role for at least one ${this.layout === "long" ? "tag" : "column"}.`));
      return;
    }
    let resp;
    try {
      resp = await fetch(api.datasets(query), { method: "POST", body: this.text,
        headers: { "Content-Type": "text/csv", Accept: "application/json", ...authHeaders() } });
    } catch {
      showError("plant-error", new Error("The server cannot be reached. Is exomap still running?"));
      return;
    }
    let body = null;
    try { body = await resp.json(); } catch { body = null; }
    if (resp.status === 401) {
      const t = window.prompt("Saving on this server needs its access token:");
      if (t) { sessionStorage.setItem("exomap-token", t); return this.upload(); }
    }
    if (!resp.ok) {
      const e = body && body.error;
      showError("plant-error", new Error(`The data were not loaded: ${e ? e.message : `error ${resp.status}`}`));
      for (const f of (e && e.fields) || []) $("plant-fields").append(el("li", {}, el("code", { text: f.field }), `: ${f.message}`));
      return;
    }
    this.show(body);
  }

  async load(id) {
    try {
      this.show(await getJSON(api.dataset(id), "Loading the plant data"));
    } catch (e) {
      showError("plant-error", e instanceof ApiError && e.status === 404
        ? new Error(`The plant dataset ${id} is not stored on this server.`) : e);
    }
  }

  show(ds) {
    this.dataset = ds;
    this.calibration = null;
    $("plant-cal").hidden = true;
    const st = this.ctx.state();
    if (st.dataset !== ds.dataset_id) {
      // another dataset: its window starts as the whole of it
      Object.assign(st, { dataset: ds.dataset_id, data_start: null, data_end: null });
      this.ctx.syncURL(true);
    }
    // the window's inputs: the link's, else the dataset's first and last record
    $("plant-start").value = st.data_start || ds.start;
    $("plant-end").value = st.data_end || ds.end;
    showError("plant-window-error", null);
    $("plant-window-note").textContent = "";
    $("plant-dataset").hidden = false;
    $("plant-dataset").dataset.datasetId = ds.dataset_id;
    const dl = $("plant-summary");
    dl.textContent = "";
    const badTotal = Object.values(ds.dropped_bad || {}).reduce((a, b) => a + b, 0);
    const rows = [
      ["Dataset", el("code", { text: ds.dataset_id })],
      ["Records", el("span", { id: "plant-records", "data-value": String(ds.records), text: `${ds.records} (of ${ds.rows} rows, ${ds.layout} layout)` })],
      ["Time span", `${ds.start} to ${ds.end} (${hours(ds.duration_s)})`],
      ["Sampling", `every ${step(ds.median_step_s)} (median)${ds.irregular_sampling ? ", irregular" : ""}`],
      ["Gaps", ds.gaps.length ? ds.gaps.map((g) => `${g.start} to ${g.end} (${hours(g.length_s)})`).join("; ") : "none"],
      ["Bad values dropped", badTotal ? Object.entries(ds.dropped_bad).map(([t, n]) => `${t}: ${n}`).join(", ") : "none"],
      ["Columns", Object.entries(ds.roles).map(([r, v]) => `${ROLE_WORDS[r] || r} ← ${v.tag} [${v.unit}], ${v.values} values`).join("; ")],
    ];
    for (const [k, v] of rows) dl.append(el("dt", { text: k }), el("dd", {}, v));
    const notes = $("plant-notes");
    notes.textContent = "";
    for (const n of ds.notes || []) notes.append(el("li", { text: n }));
    this.drawOverlay();
    if (ds.records > LONG_RECORDS && !st.data_start && !st.data_end) {
      $("plant-replay").textContent = "";
      $("plant-replay").append(el("p", { id: "plant-long", class: "small" }, `This dataset holds ${ds.records} records, `
        + "more than one replay is likely to finish in the server's time allowance: choose a window above (From, To) "
        + "and press Replay this window. The fit uses the same window."));
      $("plant-start").focus();
      return;
    }
    this.replay();
  }

  body(extra = {}) {
    return { scenario_id: this.ctx.id, dataset_id: this.dataset.dataset_id, ...this.windowFields(), ...extra };
  }

  // start and end of the window as typed (the server reads them: ISO 8601 or epoch seconds); omitted when empty
  windowFields() {
    const out = {};
    const a = $("plant-start").value.trim(), b = $("plant-end").value.trim();
    if (a) out.start = /^-?\d+(\.\d*)?$/.test(a) ? Number(a) : a;
    if (b) out.end = /^-?\d+(\.\d*)?$/.test(b) ? Number(b) : b;
    return out;
  }

  // The window typed goes in the link (nothing when it is the whole dataset), then the path and the replay.
  applyWindow() {
    if (!this.dataset) return;
    const st = this.ctx.state();
    const a = $("plant-start").value.trim(), b = $("plant-end").value.trim();
    st.data_start = a && a !== this.dataset.start ? a : null;
    st.data_end = b && b !== this.dataset.end ? b : null;
    this.ctx.syncURL(true);
    this.drawOverlay();
    this.replay();
  }

  // A refused window (422 naming start or end) is shown beside its inputs; true when e was one.
  windowError(e) {
    const bad = e instanceof ApiError ? e.fields.filter((f) => f.field === "start" || f.field === "end") : [];
    $("plant-start").removeAttribute("aria-invalid");
    $("plant-end").removeAttribute("aria-invalid");
    if (!bad.length) return false;
    for (const f of bad) $(`plant-${f.field}`).setAttribute("aria-invalid", "true");
    showError("plant-window-error", new Error(bad.map((f) => `${f.field === "start" ? "From" : "To"} (${f.field}): `
      + f.message).join("; ")));
    $("plant-window-note").textContent = "";
    return true;
  }

  describeWindow(w) {
    const ds = this.dataset;
    $("plant-window-note").textContent = w.whole
      ? `The whole dataset: ${w.records} records, ${w.start} to ${w.end}.`
      : `Window: ${w.records} of ${ds ? ds.records : "?"} records, ${w.start} to ${w.end} (from ${hours(w.offset_s)} `
        + "after the first record); times below are from the window's first record.";
    $("plant-window-note").dataset.records = String(w.records);
  }

  async drawOverlay() {
    try {
      this.overlay = await postJSON(api.overlay(), this.body(), "Placing the plant's path on the map");
      this.overlayLoading = null;
      await this.redrawOverlay();
    } catch (e) {
      if (!this.windowError(e)) showError("plant-error", e);
    }
  }

  // The path is an extra trace of the map (map.js keeps it over the map's redraws).
  async redrawOverlay() {
    if (!this.overlay) return;
    const ov = this.overlay;
    const keep = ov.time_s.map((_, i) => Number.isFinite(ov.residence_time_s[i]) && Number.isFinite(ov.feed_temperature_K[i]));
    const t = ov.time_s.filter((_, i) => keep[i]).map(toMin);
    const x = ov.residence_time_s.filter((_, i) => keep[i]).map(toMin);
    const y = ov.feed_temperature_K.filter((_, i) => keep[i]).map(toC);
    const trace = {
      type: "scatter", mode: "lines+markers", name: "plant-path", x, y, hoverinfo: "skip", cliponaxis: false,
      line: { color: "rgba(16,28,44,0.45)", width: 1 },
      marker: { size: 7, color: t, colorscale: TIME_SCALE, cmin: t[0], cmax: t[t.length - 1] || 1,
        line: { color: "#ffffff", width: 0.8 }, showscale: true,
        colorbar: { title: { text: "time [min]", side: "top" }, thickness: 10, len: 0.45, x: 0.995, xanchor: "right",
          y: 0.02, yanchor: "bottom", bgcolor: "rgba(255,255,255,0.85)", outlinewidth: 0 } },
    };
    await setExtraTraces(await plotlyReady(), $("map"), [trace]);
    let note = $("plant-map-note");
    if (!note) {
      note = el("p", { id: "plant-map-note", class: "small" });
      $("map-legend").after(note);
    }
    note.textContent = `Plant's path (dataset ${ov.dataset_id}): ${x.length} records from ${ov.start}${thinned(ov)}, `
      + `light dots first, dark dots last; the scale beside the map is minutes from ${ov.window && !ov.window.whole
        ? "the window's first record" : "the first record"}.`;
    $("map").dataset.plantPath = String(x.length);
  }

  // The overlay of the dataset in the page link, fetched once (the steady-state curves use it without the panel
  // being opened); the map gets the path too, so both views show the same records.
  async overlayFor() {
    const id = this.ctx.state().dataset;
    if (!id) return null;
    if (this.overlay && this.overlay.dataset_id === id) return this.overlay;
    if (!this.overlayLoading || this.overlayLoading.id !== id) {
      const st = this.ctx.state();
      const body = { scenario_id: this.ctx.id, dataset_id: id };
      if (st.data_start) body.start = st.data_start;
      if (st.data_end) body.end = st.data_end;
      const p = postJSON(api.overlay(), body, "Placing the plant's records").then(async (ov) => {
        this.overlay = ov;
        await this.redrawOverlay();
        return ov;
      });
      this.overlayLoading = { id, p };
    }
    return this.overlayLoading.p;
  }

  // The recorded reactor temperature against the curve's input (residence time or feed temperature), as
  // markers coloured by time on the map path's scale; null when there is nothing to draw.
  curveTrace(along) {
    const ov = this.overlay;
    if (!ov || ov.dataset_id !== this.ctx.state().dataset) return null;
    return curvePoints(ov, along);
  }

  // The note under the curves: what the plant's markers are, and that each curve holds the other input.
  describeCurves(node) {
    if (!node) return;
    const ov = this.overlay;
    node.hidden = !(ov && ov.dataset_id === this.ctx.state().dataset);
    if (node.hidden) return;
    const n = ov.reactor_temperature_K.filter((v) => Number.isFinite(v)).length;
    node.textContent = n
      ? `Markers: the plant's records (dataset ${ov.dataset_id}, ${n} with a reactor temperature, from ${ov.start}`
        + `${thinned(ov)}), `
        + "recorded reactor temperature against the recorded input, light first, dark last. Each curve holds the "
        + "other input at the setpoint's value, so a record taken at another feed temperature or residence time "
        + "is not expected to lie on it."
      : `The plant's dataset ${ov.dataset_id} has no reactor temperature to place on the curves.`;
  }

  async replay() {
    const n = ++this.seq;
    $("plant-residuals").textContent = "";
    showError("plant-window-error", null);
    try {
      const rep = await postJSON(api.replay(), this.body(), "Replaying the scenario on the recorded inputs");
      if (n !== this.seq) return;
      this.replayAnswer = rep;
      this.windowError(null);
      this.describeWindow(rep.window);
      const Plotly = await plotlyReady();
      const t = rep.time_s.map(toMin);
      const rec = (rep.recorded.reactor_temperature_K || []).map((v) => (v === null ? null : toC(v)));
      const sim = rep.simulated.temperature_K.map((v) => (v === null ? null : toC(v)));
      const data = [
        { type: "scatter", mode: "markers", name: "recorded", x: t, y: rec,
          marker: { size: 5, color: "#101c2c", symbol: "circle-open" } },
        { type: "scatter", mode: "lines", name: "simulated", x: t, y: sim, line: { color: "#a8541f", width: 2 } },
      ];
      const node = $("plant-replay");
      node.textContent = "";
      await Plotly.react(node, data, {
        height: 260, margin: { l: 56, r: 10, t: 10, b: 40 }, showlegend: true,
        legend: { orientation: "h", y: 1.12, x: 0 },
        xaxis: { title: { text: rep.window.whole ? "Time from the first record [min]"
          : "Time from the window's first record [min]" }, ticks: "outside" },
        yaxis: { title: { text: "Reactor temperature [°C]" }, ticks: "outside" },
        font: { family: "system-ui, sans-serif", size: 12 }, plot_bgcolor: "#ffffff",
      }, { displayModeBar: false, responsive: true });
      const s = rep.residual_statistics.reactor_temperature_K;
      $("plant-residuals").textContent = s
        ? `Simulated minus recorded reactor temperature over ${s.count} records: mean ${s.mean.toFixed(2)} K, `
          + `spread (SD) ${s.sd === null ? "—" : s.sd.toFixed(2)} K, RMS ${s.rms.toFixed(2)} K, largest ${s.max_abs.toFixed(2)} K.`
          + ` Started from the steady state at ${fmtTemp(rep.start_temperature_K)}.`
        : "The dataset holds no reactor temperature to compare with.";
      if (!rep.success) $("plant-residuals").textContent += ` The replay did not finish: ${rep.message}`;
      node.dataset.series = String(data.length);
    } catch (e) {
      if (n !== this.seq) return;
      $("plant-replay").textContent = "";
      if (this.windowError(e)) return;
      // too long for one replay: the server says to choose a window; point at its inputs
      showError("plant-error", e);
      if (e instanceof ApiError && e.fields.some((f) => f.field === "start")) $("plant-start").focus();
    }
  }

  async calibrate() {
    showError("plant-cal-error", null);
    const fit = [...document.querySelectorAll("#plant-targets input:checked")].map((c) => c.dataset.target);
    if (!fit.length) { showError("plant-cal-error", new Error("Tick at least one parameter to fit.")); return; }
    const extra = { fit };
    const tref = $("plant-tref").value.trim();
    if (tref) {
      const K = parseTemperature(tref);
      if (!Number.isFinite(K)) {
        showError("plant-cal-error", new Error("Reference temperature: type a temperature in °C, e.g. 80."));
        return;
      }
      extra.reference_temperature = `${K} K`;
    }
    $("plant-fit").disabled = true;
    const status = $("plant-cal-status");
    const t0 = performance.now();
    status.textContent = `Fitting ${fit.length} parameter${fit.length > 1 ? "s" : ""}: every trial replays the `
      + "window of records, and each 95 % interval needs a few fits of its own; this takes seconds to tens of seconds.";
    const tick = setInterval(() => {
      status.textContent = status.textContent.replace(/ \(\d+ s so far\)$/, "")
        + ` (${Math.round((performance.now() - t0) / 1000)} s so far)`;
    }, 1000);
    try {
      const cal = await postJSON(api.calibrate(), this.body(extra), "Fitting the parameters");
      this.calibration = cal;
      this.renderCalibration(cal);
      status.textContent = `Fitted in ${((performance.now() - t0) / 1000).toFixed(1)} s.`;
    } catch (e) {
      status.textContent = "";
      this.windowError(e);
      showError("plant-cal-error", e instanceof ApiError && e.fields.length
        ? new Error(e.fields.map((f) => `${f.field}: ${f.message}`).join("; ")) : e);
    } finally {
      clearInterval(tick);
      $("plant-fit").disabled = false;
    }
  }

  renderCalibration(cal) {
    const doc = this.ctx.scenario();
    const body = $("plant-estimates").querySelector("tbody");
    body.textContent = "";
    for (const e0 of cal.estimates) {
      // a rate constant's unit from its reaction's orders (the answer names it generically)
      const m = /^reactions\[(\d+)\]\.rate_constant$/.exec(e0.target);
      const kUnit = m && doc && doc.reactions ? rateConstantUnit(doc.reactions[Number(m[1])]) : null;
      const e = kUnit ? { ...e0, unit: kUnit } : e0;
      const [lo, hi] = e.interval_95;
      const side = (v) => (v === null ? "open" : inPlantUnits(v, e.unit));
      body.append(el("tr", { "data-target": e.target, "data-value": String(e.value) },
        el("th", { scope: "row" }, targetWords(e.target, doc)),
        el("td", { text: inPlantUnits(e.initial, e.unit) }),
        el("td", { class: "estimate", text: inPlantUnits(e.value, e.unit) }),
        el("td", { text: inPlantUnits(e.standard_error, e.unit) }),
        el("td", { class: "interval", text: `${side(lo)} to ${side(hi)}` })));
    }
    const sd = cal.residual_sd.reactor_temperature;
    const w = cal.window;
    $("plant-cal-spread").textContent = `Reference temperature ${fmtTemp(cal.reference_temperature_K)}; `
      + (w && !w.whole ? `records ${w.start} to ${w.end} (${w.records}); ` : `all ${w ? w.records : ""} records; `)
      + `${cal.observations} observations, ${cal.degrees_of_freedom} degrees of freedom`
      + (Number.isFinite(sd) ? `; residual spread ${sd.toFixed(2)} K.` : ".")
      + (cal.success ? "" : ` The fit did not converge: ${cal.message}`);
    const cor = $("plant-correlations");
    cor.textContent = "";
    if (cal.estimates.length > 1) {
      const t = el("table", { class: "plant-correlations small" });
      const head = el("tr", {}, el("th", { text: "Correlation" }));
      for (const e of cal.estimates) head.append(el("th", { scope: "col", text: targetWords(e.target, doc) }));
      t.append(head);
      cal.correlations.forEach((row, i) => {
        const tr = el("tr", {}, el("th", { scope: "row", text: targetWords(cal.estimates[i].target, doc) }));
        for (const c of row) tr.append(el("td", { text: c === null ? "—" : c.toFixed(2) }));
        t.append(tr);
      });
      cor.append(t);
    }
    const warn = $("plant-warnings");
    warn.textContent = "";
    for (const m of cal.warnings) warn.append(el("li", { class: "warning", text: m }));
    if (!cal.warnings.length) warn.append(el("li", { class: "muted small", text: "Every fitted parameter is determined by the data (no flat profile, no correlation near ±1)." }));
    // values where a fit stopped before it converged are not estimates: they are not offered for saving
    $("plant-save").disabled = !cal.success;
    showError("plant-save-error", cal.success ? null
      : new Error("This fit did not converge, so its values are not offered as a calibrated scenario."));
    $("plant-cal").hidden = false;
  }

  async save() {
    showError("plant-save-error", null);
    if (!this.calibration || !this.calibration.success) return;
    try {
      const saved = await postJSON(urls.apiSaveScenario(this.ctx.id), this.calibration.scenario,
        "Checking and saving the calibrated scenario", authHeaders());
      const st = this.ctx.state();
      window.location.assign(urls.scenarioPage(saved.id, { ...st, panel: "check", upset: null, dataset: st.dataset }));
    } catch (e) {
      if (e.status === 401) {
        const t = window.prompt("Saving on this server needs its access token:");
        if (t) { sessionStorage.setItem("exomap-token", t); return this.save(); }
      }
      showError("plant-save-error", e);
    }
  }
}
