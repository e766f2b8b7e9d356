// Units of the setpoint and map-window inputs, parsed in the browser so the view state (SI) stays exact.
// Everything else typed in the editor goes to the API as typed, and the server's unit parser checks it.

const TIME = { s: 1, sec: 1, second: 1, seconds: 1, min: 60, minute: 60, minutes: 60, h: 3600, hr: 3600,
  hour: 3600, hours: 3600, d: 86400, day: 86400, days: 86400 };
const C0 = 273.15;

function split(text) {
  const m = String(text).trim().replace(",", ".").match(/^([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*)$/);
  if (!m) return null;
  return { value: Number(m[1]), unit: m[2].trim() };
}

// "40 min" | "2400" (bare: in `bare` units, default min) -> seconds; throws Error with a plain message.
export function parseTime(text, bare = "min") {
  const p = split(text);
  if (!p || !Number.isFinite(p.value)) throw new Error("Type a residence time such as 40 min, 0.5 h or 2400 s.");
  const unit = p.unit || bare;
  const f = TIME[unit.toLowerCase()];
  if (!f) throw new Error(`"${unit}" is not a unit of time; use s, min or h.`);
  if (p.value <= 0) throw new Error("A residence time must be above zero.");
  return clean(p.value * f);
}

// 12 significant digits: what a typed or computed value is kept and written to a link as, so binary artefacts
// (37.06 min = 2223.6000000000004 s) never reach an input or a URL.
export const clean = (x) => (Number.isFinite(x) ? Number(x.toPrecision(12)) : x);

// Volumetric flow: "3.2 m³/h" | "3.2 m3/h" | "3.2 m^3/h" | "50 L/min" | "25 gpm" | "120 %" (of `nominal`) |
// "3.2" (bare: m³/h) -> m³/s. gpm is the US gallon (3.785411784 L exactly) per minute.
const GALLON_M3 = 3.785411784e-3;
const FLOW = { "m3/h": 1 / 3600, "m3/s": 1, "m3/min": 1 / 60, "l/min": 1e-3 / 60, "l/h": 1e-3 / 3600, "l/s": 1e-3,
  gpm: GALLON_M3 / 60, "gal/min": GALLON_M3 / 60 };
export function parseFlow(text, nominal) {
  const p = split(text);
  if (!p || !Number.isFinite(p.value)) throw new Error("Type a feed flow such as 3.2 m³/h, 50 L/min, 25 gpm or 120 %.");
  const unit = (p.unit || "m3/h").toLowerCase().replace(/\s+/g, "").replace("³", "3").replace("^3", "3");
  let q;
  if (unit === "%") {
    if (!Number.isFinite(nominal)) throw new Error("This scenario has no nominal feed flow to take a percentage of.");
    q = (p.value / 100) * nominal;
  } else if (FLOW[unit]) q = p.value * FLOW[unit];
  else throw new Error(`"${p.unit}" is not a unit of flow; use m³/h, L/min, gpm or % of nominal.`);
  if (!(q > 0)) throw new Error("A feed flow must be above zero.");
  return clean(q);
}
export const fmtFlow = (q, digits = 4) => (Number.isFinite(q) ? `${round(q * 3600, digits)} m³/h` : "—");

// What the setpoint inputs show: no float noise, one spelling (°C).
export const inputMin = (s) => (Number.isFinite(s) ? `${round(s / 60, 5)} min` : "");
export const inputTemp = (K) => (Number.isFinite(K) ? `${Number((K - C0).toFixed(2))} °C` : "");
export const inputFlow = (q) => (Number.isFinite(q) ? `${round(q * 3600, 4)} m³/h` : "");

// "35 degC" | "35 °C" | "308 K" | "95 degF" | "35" (bare: in `bare`, default degC) -> kelvin.
export function parseTemperature(text, bare = "degC") {
  const p = split(text);
  if (!p || !Number.isFinite(p.value)) throw new Error("Type a temperature such as 35 °C or 308 K.");
  const unit = (p.unit || bare).replace("°", "deg").replace(/\s+/g, "");
  let K;
  if (/^(degC|C|celsius)$/i.test(unit)) K = p.value + C0;
  else if (/^(K|kelvin)$/i.test(unit)) K = p.value;
  else if (/^(degF|F|fahrenheit)$/i.test(unit)) K = (p.value - 32) * 5 / 9 + C0;
  else throw new Error(`"${p.unit}" is not a unit of temperature; use °C, K or °F.`);
  if (!(K > 0)) throw new Error("That temperature is below absolute zero.");
  return clean(K);
}

const round = (x, digits) => Number(x.toPrecision(digits));
export const toMin = (s) => s / 60;
export const toC = (K) => K - C0;
export const fromC = (c) => c + C0;
export const fromMin = (m) => m * 60;

export function fmtTime(s, digits = 4) {
  if (s === null || s === undefined || !Number.isFinite(s)) return "—";
  if (Math.abs(s) >= 5400) return `${round(s / 3600, digits)} h`;
  if (Math.abs(s) >= 90) return `${round(s / 60, digits)} min`;
  return `${round(s, digits)} s`;
}
export const fmtMin = (s, digits = 4) => (Number.isFinite(s) ? `${round(s / 60, digits)} min` : "—");
export const fmtTemp = (K, digits = 1) => (Number.isFinite(K) ? `${(K - C0).toFixed(digits)} °C` : "—");
export const fmtDeltaK = (dK, digits = 1) => (Number.isFinite(dK) ? `${Number(dK.toFixed(digits))} K` : "—");
// keys whose percent values are percentage points (the difference of two percentages)
export const isPoints = (key) => /_points$/.test(key) || (/opening/.test(key) && /(percent|_pct)$/.test(key));

// A sentence from the check (reasons, notes) in plant units: "383.1 K (110.0 degC)" -> "110.0 °C", degC -> °C,
// and a region's internal key -> the legend's words. The SI original stays available (title, on hover).
export function plainText(text, legend = []) {
  let s = String(text);
  s = s.replace(/(-?\d+(?:\.\d+)?)\s*K\s*\((-?\d+(?:\.\d+)?)\s*(?:degC|°C)\)/g, "$2 °C");
  s = s.replace(/(\d)\s*degC\b/g, "$1 °C").replace(/\bdegC\b/g, "°C").replace(/(\d)\s*degF\b/g, "$1 °F");
  s = s.replace(/\bregion '([a-z_]+)'/g, (m, key) => {
    const e = (legend || []).find((x) => x.key === key);
    return e ? `region “${e.label}”` : `region “${key.replace(/_/g, " ")}”`;
  });
  return s;
}
export const fmtPct = (x, digits = 1) => (Number.isFinite(x) ? `${(100 * x).toFixed(digits)} %` : "—");
export const fmtNum = (x, digits = 4) => (Number.isFinite(x) ? String(round(x, digits)) : "—");

// A value with a unit read off its JSON key (temperature_K, time_s, ...), for tables of margins and figures.
export function fmtByKey(key, value) {
  if (value === null || value === undefined) return "none";
  if (typeof value === "boolean") return value ? "yes" : "no";
  if (typeof value === "string") return plainText(value);
  if (Array.isArray(value)) return value.length ? value.join("; ") : "none";
  if (typeof value !== "number") return JSON.stringify(value);
  if (/_K$/.test(key) && /(temperature|mtsr|mtt|td24|_T_)/i.test(key) && !/(rise|margin|delta|drop|dT|_to_)/i.test(key))
    return fmtTemp(value);
  if (/_K$/.test(key)) return fmtDeltaK(value);
  if (/_s$/.test(key)) return fmtTime(value);
  // a difference of two openings (or other fractions) in percent is in percentage points, not a percentage
  if (isPoints(key)) return `${Number(value.toFixed(1))} points`;
  if (/(percent|_pct)$/.test(key)) return `${Number(value.toFixed(1))} %`;
  if (/(fraction|opening|conversion)$/.test(key)) return fmtPct(value);
  if (/_m$/.test(key)) return `${round(value, 4)} m`;
  return fmtNum(value);
}

// "residence_time_margin_percent" -> "Residence time margin"
export function plainKey(key) {
  const words = key.replace(/tmr_ad/g, "tmrad").replace(/_(K|s|m|W|percent|pct|fraction|per_s|m3_per_s|mol_per_m3|J_per_mol)$/, "")
    .replace(/_/g, " ");
  const caps = { mtsr: "MTSR", tmrad: "TMRad", td24: "TD24", mtt: "MTT", dt: "ΔT", ad: "ad" };
  return words.split(" ").map((w, i) => caps[w.toLowerCase()] ||
    (i === 0 ? w.charAt(0).toUpperCase() + w.slice(1) : w)).join(" ");
}
