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
  return p.value * f;
}

// "35 degC" | "35 °C" | "308 K" | "95 degF" | "35" (bare: in `bare`, default degC) -> kelvin.
export function parseTemperature(text, bare = "degC") {
  const p = split(text);
  if (!p || !Number.isFinite(p.value)) throw new Error("Type a temperature such as 35 degC or 308 K.");
  const unit = (p.unit || bare).replace("°", "deg").replace(/\s+/g, "");
  let K;
  if (/^(degC|C|celsius)$/i.test(unit)) K = p.value + C0;
  else if (/^(K|kelvin)$/i.test(unit)) K = p.value;
  else if (/^(degF|F|fahrenheit)$/i.test(unit)) K = (p.value - 32) * 5 / 9 + C0;
  else throw new Error(`"${p.unit}" is not a unit of temperature; use degC, K or degF.`);
  if (!(K > 0)) throw new Error("That temperature is below absolute zero.");
  return K;
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
export const fmtDeltaK = (dK, digits = 1) => (Number.isFinite(dK) ? `${dK.toFixed(digits)} K` : "—");
export const fmtPct = (x, digits = 1) => (Number.isFinite(x) ? `${(100 * x).toFixed(digits)} %` : "—");
export const fmtNum = (x, digits = 4) => (Number.isFinite(x) ? String(round(x, digits)) : "—");

// A value with a unit read off its JSON key (temperature_K, time_s, ...), for tables of margins and figures.
export function fmtByKey(key, value) {
  if (value === null || value === undefined) return "none";
  if (typeof value === "boolean") return value ? "yes" : "no";
  if (typeof value === "string") return value;
  if (Array.isArray(value)) return value.length ? value.join("; ") : "none";
  if (typeof value !== "number") return JSON.stringify(value);
  if (/_K$/.test(key) && /(temperature|mtsr|mtt|td24|_T_)/i.test(key) && !/(rise|margin|delta|drop|dT|_to_)/i.test(key))
    return fmtTemp(value);
  if (/_K$/.test(key)) return fmtDeltaK(value);
  if (/_s$/.test(key)) return fmtTime(value);
  if (/(percent|_pct)$/.test(key)) return `${value.toFixed(1)} %`;
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
