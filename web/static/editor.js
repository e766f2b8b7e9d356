// The scenario editor: the scenario's fields in groups, each shown in a trade unit and accepted as typed.
// An untouched field keeps its exact SI value; a changed one is sent as typed ("35 degC"), or, when it is a
// bare number, with the unit shown beside it, so the server's unit parser does every conversion.
// Errors from the API's fields list are shown beside the field they name.

import { el } from "./check.js";

// Display units: [pint unit string, SI per display unit, offset]
const UNITS = {
  length: ["m", 1, 0], pressure: ["bar", 1e5, 0], temperature: ["degC", 1, 273.15], density: ["kg/m^3", 1, 0],
  specific_heat: ["kJ/(kg*K)", 1000, 0], flow: ["m^3/h", 1 / 3600, 0], concentration: ["mol/L", 1000, 0],
  molar_energy: ["kJ/mol", 1000, 0], time: ["s", 1, 0], minutes: ["min", 60, 0], conductance: ["kW/K", 1000, 0],
  power: ["kW", 1000, 0], inverse_length: ["1/m", 1, 0], fraction: ["", 1, 0], number: ["", 1, 0],
  kv: ["", 1, 0],
};
const UNIT_SHOWN = { kv: "m³/h at 1 bar", fraction: "0..1", temperature: "°C", number: "" };

const K0_UNIT = (n) => (n === 0 ? "mol/(m^3*s)" : n === 1 ? "1/s" : n === 2 ? "m^3/(mol*s)" : `m^${3 * (n - 1)}/(mol^${n - 1}*s)`);

function groups(doc) {
  const sp = doc.species || [];
  const rx = (doc.reactions || []).map((r, j) => {
    const n = Object.values(r.orders || {}).reduce((a, b) => a + Number(b || 0), 0);
    return {
      title: `Reaction ${j + 1}${r.label ? ": " + r.label : ""}`, key: `reactions[${j}]`,
      fields: [
        [`reactions[${j}].label`, "Label", "text"],
        ...sp.map((s) => [`reactions[${j}].stoichiometry.${s}`, `Coefficient of ${s} (negative: consumed)`, "number"]),
        ...sp.map((s) => [`reactions[${j}].orders.${s}`, `Order in ${s}`, "number"]),
        [`reactions[${j}].pre_exponential`, "Pre-exponential factor", "k0", K0_UNIT(n)],
        [`reactions[${j}].activation_energy`, "Activation energy", "molar_energy"],
        [`reactions[${j}].reaction_enthalpy`, "Reaction enthalpy (exothermic: negative)", "molar_energy"],
        [`reactions[${j}].decomposition`, "Decomposition reaction", "bool"],
      ],
    };
  });
  return [
    { title: "Scenario", key: "scenario", fields: [["title", "Title", "text"], ["description", "Description", "textarea"]] },
    { title: "Vessel", key: "vessel", fields: [
      ["vessel.diameter", "Diameter", "length"], ["vessel.height", "Height", "length"],
      ["vessel.level_setpoint", "Level setpoint", "length"],
      ["vessel.headspace_pressure", "Headspace pressure (absolute)", "pressure"]] },
    { title: "Outlet valve", key: "outlet_valve", fields: [
      ["outlet_valve.kv", "Kv", "kv"],
      ["outlet_valve.characteristic", "Characteristic", "choice", ["linear", "equal_percentage", "quick_opening"]],
      ["outlet_valve.rangeability", "Rangeability", "number"],
      ["outlet_valve.downstream_pressure", "Downstream pressure (absolute)", "pressure"],
      ["outlet_valve.drop_below_vessel", "Drop from vessel bottom to valve", "length"],
      ["outlet_valve.opening", "Fixed opening (blank: level controller or the opening that passes the feed)", "fraction"],
      ["outlet_valve.level_control.gain", "Level controller gain (blank: no controller)", "inverse_length"],
      ["outlet_valve.level_control.reset_time", "Level controller reset time", "time"]] },
    { title: "Liquid", key: "liquid", fields: [
      ["liquid.density", "Density", "density"], ["liquid.heat_capacity", "Heat capacity", "specific_heat"]] },
    ...rx,
    { title: "Feed", key: "feed", fields: [
      ["feed.flow", "Flow", "flow"], ["feed.temperature", "Temperature", "temperature"],
      ...sp.map((s) => [`feed.concentrations.${s}`, `Concentration of ${s}`, "concentration"])] },
    { title: "Cooling jacket (blank: none)", key: "jacket", fields: [
      ["jacket.ua", "UA", "conductance"], ["jacket.coolant_temperature", "Coolant temperature", "temperature"]] },
    { title: "Heat loss to ambient (blank: none)", key: "heat_loss", fields: [
      ["heat_loss.ua", "UA", "conductance"], ["heat_loss.ambient_temperature", "Ambient temperature", "temperature"],
      ["agitator_power", "Agitator power", "power"]] },
    { title: "Limits", key: "limits", fields: [
      ["limits.max_temperature", "Maximum temperature", "temperature"],
      ["limits.alarm_temperature", "Alarm temperature", "temperature"],
      ["limits.level_high", "High level", "length"], ["limits.level_low", "Low level", "length"],
      ["limits.technical_limit_temperature", "Maximum technical temperature (MTT)", "temperature"]] },
  ];
}

// "reactions[0].orders.A" -> ["reactions", 0, "orders", "A"]
export function pathParts(path) {
  const out = [];
  for (const part of path.split(".")) {
    const m = part.match(/^([^[\]]+)((?:\[\d+\])*)$/);
    if (!m) { out.push(part); continue; }
    out.push(m[1]);
    for (const i of m[2].matchAll(/\[(\d+)\]/g)) out.push(Number(i[1]));
  }
  return out;
}
export function getPath(obj, path) {
  let v = obj;
  for (const p of pathParts(path)) { if (v === null || v === undefined) return undefined; v = v[p]; }
  return v;
}
function setPath(obj, path, value) {
  const parts = pathParts(path);
  let v = obj;
  parts.slice(0, -1).forEach((p, i) => {
    if (v[p] === null || v[p] === undefined || typeof v[p] !== "object")
      v[p] = typeof parts[i + 1] === "number" ? [] : {};
    v = v[p];
  });
  const last = parts[parts.length - 1];
  if (value === undefined) delete v[last]; else v[last] = value;
}

const round12 = (x) => Number(x.toPrecision(12));

function display(si, kind) {
  if (si === null || si === undefined) return "";
  if (typeof si !== "number") return String(si);
  const u = UNITS[kind];
  if (!u) return String(si);
  return String(round12((si - u[2]) / u[1]));
}

// "reactions[0].orders.A" -> itself, "reactions[0].orders", "reactions[0]", "reactions"
export function ancestors(path) {
  const out = [];
  for (let p = path; p; p = p.replace(/(\.[^.[\]]+|\[\d+\])$/, "")) {
    out.push(p);
    if (!/(\.[^.[\]]+|\[\d+\])$/.test(p)) break;
  }
  return out;
}

// "kJ/(kg*K)" -> "kJ/(kg·K)", "m^3/h" -> "m³/h" (shown; what is sent keeps the plain spelling)
const pretty = (u) => String(u).replace(/\^3/g, "³").replace(/\^2/g, "²").replace(/\*/g, "·").replace(/degC/g, "°C");

function fieldId(path) { return "f-" + path.replace(/[^A-Za-z0-9_-]/g, "_"); }

export class Editor {
  constructor(root, doc, { onSave }) {
    this.root = root;
    this.doc = doc;
    this.onSave = onSave;
    this.inputs = new Map();
    this.render();
  }

  render() {
    const host = this.root.querySelector("#editor-groups");
    host.textContent = "";
    this.inputs.clear();
    for (const g of groups(this.doc)) {
      const fs = el("fieldset", { class: "editor-group", "data-group": g.key }, el("legend", { text: g.title }));
      for (const [path, label, kind, extra] of g.fields) fs.append(this.field(path, label, kind, extra));
      host.append(fs);
    }
  }

  field(path, label, kind, extra) {
    const id = fieldId(path);
    const original = getPath(this.doc, path);
    const row = el("div", { class: "field", "data-field": path });
    row.append(el("label", { for: id, text: label }));
    let input;
    if (kind === "choice") {
      input = el("select", { id });
      for (const c of extra) input.append(el("option", { value: c, text: c.replace(/_/g, " "), selected: c === original ? "" : null }));
    } else if (kind === "bool") {
      input = el("input", { id, type: "checkbox" });
      input.checked = Boolean(original);
    } else if (kind === "textarea") {
      input = el("textarea", { id, rows: "2" });
      input.value = original ?? "";
    } else {
      input = el("input", { id, type: "text", spellcheck: "false", autocomplete: "off" });
      input.value = kind === "k0" ? (original ?? "") === "" ? "" : String(original) : display(original, kind);
    }
    input.dataset.initial = kind === "bool" ? String(input.checked) : input.value;
    input.setAttribute("aria-describedby", `${id}-err`);
    row.append(input);
    const unit = kind === "k0" ? extra : UNIT_SHOWN[kind] ?? (UNITS[kind] ? UNITS[kind][0] : "");
    row.append(el("span", { class: "unit", text: pretty(unit) }));
    row.append(el("span", { id: `${id}-err`, class: "field-error", role: "alert", hidden: "" }));
    this.inputs.set(path, { input, kind, original, unit: kind === "k0" ? "" : UNITS[kind] ? UNITS[kind][0] : "" });
    return row;
  }

  // The document to save: the original with every changed field as typed.
  collect() {
    const out = JSON.parse(JSON.stringify(this.doc));
    for (const [path, f] of this.inputs) {
      const { input, kind } = f;
      const current = kind === "bool" ? String(input.checked) : input.value;
      if (current === input.dataset.initial) continue;
      let value;
      if (kind === "bool") value = input.checked;
      else if (kind === "text" || kind === "textarea" || kind === "choice") value = input.value;
      else {
        const t = input.value.trim();
        if (t === "") value = undefined;
        else if (/^[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?$/.test(t)) value = f.unit ? `${t} ${f.unit}` : Number(t);
        else value = t;
      }
      setPath(out, path, value);
    }
    // Blank optional groups mean "none".
    for (const key of ["jacket", "heat_loss"]) {
      const g = out[key];
      if (g && typeof g === "object" && Object.values(g).every((v) => v === undefined || v === "")) out[key] = null;
    }
    const v = out.outlet_valve;
    if (v && v.level_control && Object.keys(v.level_control).length === 0) delete v.level_control;
    if (v && v.level_control === null) delete v.level_control;
    return out;
  }

  clearErrors() {
    for (const n of this.root.querySelectorAll(".field-error")) { n.hidden = true; n.textContent = ""; }
    for (const n of this.root.querySelectorAll("[aria-invalid]")) n.removeAttribute("aria-invalid");
  }

  // Put each {field, message} beside its input (or the nearest enclosing group); returns those left over.
  showErrors(fields) {
    this.clearErrors();
    const left = [];
    let first = null;
    for (const { field, message } of fields || []) {
      const path = String(field).replace(/^scenario\./, "");
      let target = null;
      for (const p of ancestors(path)) {
        const f = this.inputs.get(p);
        if (f) { target = f.input; break; }
        const group = this.root.querySelector(`[data-group="${CSS.escape(p)}"]`);
        if (group) { target = group.querySelector("input,select,textarea"); break; }
      }
      if (!target) { left.push({ field, message }); continue; }
      const err = this.root.querySelector(`#${CSS.escape(target.id)}-err`);
      err.textContent = err.textContent ? `${err.textContent}; ${message}` : message;
      err.hidden = false;
      target.setAttribute("aria-invalid", "true");
      first = first || target;
    }
    if (first) first.focus();
    return left;
  }

  revert() {
    this.clearErrors();
    this.render();
  }
}
