// Every URL the pages use, built in one place (the server's twin is exomap/web/urls.py).
// View state lives in the query string in SI numbers: residence_time [s], feed_temperature [K],
// coolant_temperature [K] (jacketed tanks), map_residence_time "lo,hi" [s], map_feed_temperature "lo,hi" [K],
// points "n_tau,n_tin", branch, panel, upset; a simulation as sim_start (low | high), sim_duration [s] and
// sim_events (the event lines as typed, one a line); dataset (the plant dataset the Plant data panel shows) and
// data_start, data_end (its window of records, as typed: ISO 8601 or epoch seconds). The print sheet adds its sign-off fields (SIGNOFF_KEYS):
// they travel in its link and are never stored.

export const API = "/api/v1";
export const VIEW_KEYS = [
  "residence_time", "feed_temperature", "coolant_temperature", "map_residence_time", "map_feed_temperature",
  "points", "branch", "panel", "upset", "sim_start", "sim_duration", "sim_events", "dataset",
  "data_start", "data_end",
];
export const SIGNOFF_KEYS = ["prepared_by", "reviewed_by", "change_reference", "review_date"];
export const PANELS = ["check", "curves", "simulate", "editor", "plant"];
const TEXT_LIMIT = { sim_events: 4000 };

const seg = (s) => encodeURIComponent(String(s));

function text(v) {
  if (Array.isArray(v)) return v.map(text).join(",");
  // 12 significant digits: a link never carries binary noise such as 2223.6000000000004
  if (typeof v === "number") return String(Number(v.toPrecision(12)));
  return String(v);
}

function query(params) {
  const parts = [];
  for (const [k, v] of Object.entries(params || {})) {
    if (v === null || v === undefined || v === "") continue;
    parts.push(`${encodeURIComponent(k)}=${encodeURIComponent(text(v)).replace(/%2C/g, ",")}`);
  }
  return parts.length ? "?" + parts.join("&") : "";
}

function ordered(state, keys = VIEW_KEYS) {
  const out = {};
  for (const k of keys) if (state && state[k] !== undefined && state[k] !== null) out[k] = state[k];
  return out;
}

// -- view state ---------------------------------------------------------------------------------------
function pair(s) {
  if (!s) return null;
  const v = String(s).split(",").map(Number);
  return v.length === 2 && v.every(Number.isFinite) ? v : null;
}

export function readState(search = window.location.search) {
  const q = new URLSearchParams(search);
  const num = (k) => (q.has(k) && Number.isFinite(Number(q.get(k))) && q.get(k) !== "" ? Number(q.get(k)) : null);
  const st = {
    residence_time: num("residence_time"),
    feed_temperature: num("feed_temperature"),
    map_residence_time: pair(q.get("map_residence_time")),
    map_feed_temperature: pair(q.get("map_feed_temperature")),
    points: pair(q.get("points")),
    branch: ["low", "high"].includes(q.get("branch")) ? q.get("branch") : null,
    panel: PANELS.includes(q.get("panel")) ? q.get("panel") : null,
    upset: num("upset"),
    coolant_temperature: num("coolant_temperature"),
    sim_start: ["low", "high"].includes(q.get("sim_start")) ? q.get("sim_start") : null,
    sim_duration: num("sim_duration"),
    sim_events: q.has("sim_events") ? q.get("sim_events").slice(0, TEXT_LIMIT.sim_events) : null,
    // the plant dataset the "Plant data" panel shows (a content id: hex digits)
    dataset: /^[0-9a-f]{1,64}$/.test(q.get("dataset") || "") ? q.get("dataset") : null,
    // its window of records as typed (the server reads and checks the times)
    data_start: q.get("data_start") ? q.get("data_start").slice(0, 64) : null,
    data_end: q.get("data_end") ? q.get("data_end").slice(0, 64) : null,
  };
  if (st.points) st.points = st.points.map((n) => Math.round(n));
  for (const k of SIGNOFF_KEYS) st[k] = q.has(k) ? q.get(k).slice(0, 200) : null;
  return st;
}

// -- pages --------------------------------------------------------------------------------------------
export const home = () => "/";
export const scenarioPage = (id, state) => `/scenarios/${seg(id)}` + query(ordered(state));
export const printPage = (id, state) => `/scenarios/${seg(id)}/print` + query(ordered(state, [...VIEW_KEYS,
  ...SIGNOFF_KEYS]));
export const absolute = (path) => new URL(path, window.location.origin).href;

// -- API ----------------------------------------------------------------------------------------------
export const apiScenarios = () => `${API}/scenarios`;
// Saving an edit records the scenario it came from (store metadata, not part of the content id).
export const apiSaveScenario = (derivedFrom) => `${API}/scenarios` + query({ derived_from: derivedFrom });
export const apiScenario = (id) => `${API}/scenarios/${seg(id)}`;
export const apiVersion = () => `${API}/version`;
export const apiPost = (kind) => `${API}/${seg(kind)}`;

export function apiAnswer(id, kind, params) {
  if (!["steady", "branch", "map", "check", "simulate"].includes(kind)) throw new Error(`unknown answer ${kind}`);
  return `${API}/scenarios/${seg(id)}/${kind}` + query(params);
}

// The JSON twin of a scenario page: the check at its setpoint.
export function twinOfPage(id, state) {
  return apiAnswer(id, "check", {
    residence_time: state.residence_time, feed_temperature: state.feed_temperature,
    coolant_temperature: state.coolant_temperature, branch: state.branch,
  });
}

export function mapOfPage(id, state, format) {
  return apiAnswer(id, "map", {
    residence_time: state.map_residence_time, feed_temperature: state.map_feed_temperature,
    points: state.points, coolant_temperature: state.coolant_temperature, format,
  });
}

// -- compare (the server's twin: exomap/web/urls.py COMPARE_KEYS) ---------------------------------------
export const COMPARE_KEYS = [
  "a", "b", "residence_time_a", "feed_temperature_a", "branch_a", "residence_time_b", "feed_temperature_b",
  "branch_b", "map_residence_time", "map_feed_temperature", "points", "prepared_by", "reviewed_by",
  "change_reference", "review_date",
];
const SIGN_OFF = ["prepared_by", "reviewed_by", "change_reference", "review_date"];

function compareOrdered(state) {
  const out = {};
  for (const k of COMPARE_KEYS) if (state && state[k] !== undefined && state[k] !== null && state[k] !== "") out[k] = state[k];
  return out;
}

export function readCompareState(search = window.location.search) {
  const q = new URLSearchParams(search);
  const st = {};
  for (const k of COMPARE_KEYS) if (q.has(k) && q.get(k) !== "") st[k] = q.get(k);
  for (const k of ["residence_time_a", "feed_temperature_a", "residence_time_b", "feed_temperature_b"])
    if (k in st) st[k] = Number.isFinite(Number(st[k])) ? Number(st[k]) : undefined;
  return st;
}

export const comparePage = (state) => "/compare" + query(compareOrdered(state));
export const comparePrintPage = (state) => "/compare/print" + query(compareOrdered(state));

// The GET twin of a comparison: the page's keys, the map window without its "map_" prefix, no sign-off fields.
export function apiCompare(state) {
  const p = {};
  for (const [k, v] of Object.entries(compareOrdered(state))) if (!SIGN_OFF.includes(k)) p[k.replace(/^map_/, "")] = v;
  return `${API}/compare` + query(p);
}

// -- probability map (DESIGN.md §11) -----------------------------------------------------------------------
export const UNCERTAINTY_KEYS = [
  "samples", "seed", "show", "map_residence_time", "map_feed_temperature", "points", "residence_time",
  "feed_temperature", "branch",
];
export const SHOWN = ["unsafe", "runaway", "unstable", "multiple"];

export function readUncertaintyState(search = window.location.search) {
  const q = new URLSearchParams(search);
  const whole = (k) => (q.has(k) && /^\d+$/.test(q.get(k)) ? Number(q.get(k)) : null);
  const st = {
    samples: whole("samples"),
    seed: whole("seed"),
    show: SHOWN.includes(q.get("show")) ? q.get("show") : null,
    map_residence_time: pair(q.get("map_residence_time")),
    map_feed_temperature: pair(q.get("map_feed_temperature")),
    points: pair(q.get("points")),
    residence_time: positive(q.get("residence_time")),
    feed_temperature: positive(q.get("feed_temperature")),
    branch: ["low", "high"].includes(q.get("branch")) ? q.get("branch") : null,
  };
  if (st.points) st.points = st.points.map((n) => Math.round(n));
  return st;
}

function positive(text) {
  const v = Number(text);
  return text !== null && text !== "" && Number.isFinite(v) && v > 0 ? v : null;
}

export function uncertaintyPage(id, state) {
  const out = {};
  for (const k of UNCERTAINTY_KEYS) if (state && state[k] !== undefined && state[k] !== null) out[k] = state[k];
  return `/scenarios/${seg(id)}/uncertainty` + query(out);
}

// The check with confidence of the page's view: its setpoint (default the scenario's feed), samples and seed.
export function uncertaintyCheck(id, state) {
  return apiAnswer(id, "check", {
    residence_time: state.residence_time, feed_temperature: state.feed_temperature, branch: state.branch,
    samples: state.samples ?? 256, seed: state.seed,
  });
}

export function uncertaintyMap(id, state, format) {
  return apiAnswer(id, "map", {
    samples: state.samples ?? 256, seed: state.seed, residence_time: state.map_residence_time,
    feed_temperature: state.map_feed_temperature, points: state.points, format,
  });
}
