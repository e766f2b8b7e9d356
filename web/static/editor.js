// The scenario editor: the scenario's fields in groups, each shown in a trade unit and accepted as typed.
// An untouched field keeps its exact SI value; a changed one is sent as typed ("35 degC"), or, when it is a
// bare number, with the unit shown beside it, so the server's unit parser does every conversion.
// Errors from the API's fields list are shown beside the field they name. Species and reactions can be added
// and removed (the rules are in editor_rows.js); values typed so far survive those changes.

import { el } from "./check.js";
import {
  speciesNameProblem, withSpecies, speciesRemovalProblem, withoutSpecies, withReaction, reactionRemovalProblem,
  withoutReaction,
} from "./editor_rows.js";

// Display units: [pint unit string, SI per display unit, offset]
const UNITS = {
  length: ["m", 1, 0], pressure: ["bar", 1e5, 0], temperature: ["degC", 1, 273.15], density: ["kg/m^3", 1, 0],
  specific_heat: ["kJ/(kg*K)", 1000, 0], flow: ["m^3/h", 1 / 3600, 0], concentration: ["mol/L", 1000, 0],
  molar_energy: ["kJ/mol", 1000, 0], time: ["s", 1, 0], minutes: ["min", 60, 0], conductance: ["kW/K", 1000, 0],
  power: ["kW", 1000, 0], inverse_length: ["1/m", 1, 0], fraction: ["", 1, 0], number: ["", 1, 0],
  kv: ["", 1, 0], temperature_difference: ["K", 1, 0], percent: ["%", 0.01, 0], hours: ["h", 3600, 0],
};
const UNIT_SHOWN = { kv: "m³/h at 1 bar", fraction: "0..1", temperature: "°C", number: "", sensitivity: "K per K" };

// The thresholds of the setpoint check (check_policy), each in the unit an engineer reads it in. Defaults are
// the project's (README); a policy key this list does not know yet is still shown, in SI.
const POLICY_FIELDS = [
  ["min_feed_temperature_margin", "Feed-temperature rise to ignition, at least", "temperature_difference"],
  ["min_residence_time_margin", "Residence-time rise to ignition, at least", "percent"],
  ["min_extinction_margin", "Feed-temperature drop to extinction (hot state), at least", "temperature_difference"],
  ["min_temperature_margin", "Steady temperature below the maximum, at least", "temperature_difference"],
  ["min_mtsr_margin", "MTSR below the maximum temperature, at least", "temperature_difference"],
  ["sensitivity", "Sensitive above (steady-temperature rise per K of feed)", "number"],
  ["valve_min", "Usable valve opening from", "percent"],
  ["valve_max", "Usable valve opening to", "percent"],
  ["upset_duration", "Simulated time of each upset", "hours"],
  ["min_time_to_act", "Time to act before an overflow, at least", "minutes"],
];

const K0_UNIT = (n) => (n === 0 ? "mol/(m^3*s)" : n === 1 ? "1/s" : n === 2 ? "m^3/(mol*s)" : `m^${3 * (n - 1)}/(mol^${n - 1}*s)`);

function groups(doc) {
  const sp = doc.species || [];
  const rx = (doc.reactions || []).map((r, j) => {
    const n = Object.values(r.orders || {}).reduce((a, b) => a + Number(b || 0), 0);
    return {
      title: `Reaction ${j + 1}${r.label ? ": " + r.label : ""}`, key: `reactions[${j}]`, reaction: j,
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
    { title: "Species", key: "species", species: true, fields: [] },
    ...rx,
    { key: "reactions-add", addReaction: true, fields: [] },
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
    { title: "Check thresholds (blank: the project default)", key: "check_policy", fields: policyFields(doc) },
  ];
}

function policyFields(doc) {
  const have = doc.check_policy || {};
  const known = POLICY_FIELDS.filter(([k]) => k in have || k !== "min_time_to_act");
  const extra = Object.keys(have).filter((k) => !POLICY_FIELDS.some(([p]) => p === k))
    .map((k) => [k, k.replace(/_/g, " "), "number"]);
  return [...known, ...extra].map(([k, label, kind]) => [`check_policy.${k}`, label, kind]);
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
  // own keys only, so a species named like a built-in property ("constructor") reads as absent
  for (const p of pathParts(path)) {
    if (v === null || typeof v !== "object" || !Object.prototype.hasOwnProperty.call(v, p)) return undefined;
    v = v[p];
  }
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

const clone = (x) => JSON.parse(JSON.stringify(x));
const NUMBER = /^[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?$/;

export class Editor {
  // `doc` is the saved scenario (canonical, SI); `work` is it with the species and reactions added or removed
  // so far, still with the saved values; what is typed lives in the inputs until collect().
  constructor(root, doc, { onSave }) {
    this.root = root;
    this.doc = doc;
    this.onSave = onSave;
    this.inputs = new Map();
    this.slots = new Map(); // field path -> {input, err}: where an error about that path is shown
    this.reset();
    this.render();
  }

  reset() {
    this.work = clone(this.doc);
    this.serial = 0;
    // a stable key per reaction, so what was typed in reaction 3 follows it when reaction 2 is removed
    this.rxKeys = (this.work.reactions || []).map(() => `r${this.serial++}`);
  }

  render() {
    const host = this.root.querySelector("#editor-groups");
    host.textContent = "";
    this.inputs.clear();
    this.slots.clear();
    for (const g of groups(this.work)) {
      if (g.addReaction) { host.append(this.addReactionBlock()); continue; }
      const fs = el("fieldset", { class: "editor-group", "data-group": g.key }, el("legend", { text: g.title }));
      if (g.species) this.speciesRows(fs);
      for (const [path, label, kind, extra] of g.fields) fs.append(this.field(path, label, kind, extra));
      if (g.reaction !== undefined) this.reactionTools(fs, g.reaction);
      host.append(fs);
    }
    for (let j = 0; j < (this.work.reactions || []).length; j++) this.updateK0Unit(j);
  }

  field(path, label, kind, extra) {
    const id = fieldId(path);
    const original = getPath(this.work, path);
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
    const err = el("span", { id: `${id}-err`, class: "field-error", role: "alert", hidden: "" });
    row.append(err);
    this.inputs.set(path, { input, kind, original, unit: kind === "k0" ? "" : UNITS[kind] ? UNITS[kind][0] : "" });
    this.slots.set(path, { input, err });
    const m = path.match(/^reactions\[(\d+)\]\.orders\./);
    if (m) input.addEventListener("input", () => this.updateK0Unit(Number(m[1])));
    const lab = path.match(/^reactions\[(\d+)\]\.label$/);
    if (lab) input.addEventListener("input", () => this.updateLegend(Number(lab[1])));
    return row;
  }

  // -- species ----------------------------------------------------------------------------------------------
  speciesRows(fs) {
    fs.append(el("p", { class: "muted small", text: "The names used in the reactions and the feed. Removing a species "
      + "also removes it from every reaction and from the feed." }));
    const list = el("ul", { class: "species-list" });
    (this.work.species || []).forEach((name, i) => {
      const id = fieldId(`species[${i}]`);
      const button = el("button", { type: "button", id, class: "remove-species", "data-species": name,
        "aria-label": `Remove species ${name}`, "aria-describedby": `${id}-err`, text: "Remove" });
      button.addEventListener("click", () => this.removeSpecies(name));
      const err = el("span", { id: `${id}-err`, class: "field-error", role: "alert", hidden: "" });
      list.append(el("li", { class: "species-row", "data-species": name },
        el("span", { class: "species-name", text: name }), button, err));
      this.slots.set(`species[${i}]`, { input: button, err });
    });
    fs.append(list);
    const row = el("div", { class: "field species-add", "data-field": "new-species" });
    const input = el("input", { id: "f-new-species", type: "text", spellcheck: "false", autocomplete: "off",
      "aria-describedby": "f-new-species-err" });
    input.addEventListener("keydown", (ev) => {
      if (ev.key === "Enter") { ev.preventDefault(); this.addSpecies(input.value); }
    });
    const button = el("button", { type: "button", id: "add-species", text: "Add species" });
    button.addEventListener("click", () => this.addSpecies(input.value));
    const err = el("span", { id: "f-new-species-err", class: "field-error", role: "alert", hidden: "" });
    row.append(el("label", { for: "f-new-species", text: "New species name" }), input, button, err);
    fs.append(row);
    this.slots.set("species", { input, err });
  }

  addSpecies(typed) {
    const name = String(typed).trim();
    const problem = speciesNameProblem(name, this.work.species);
    if (problem) { this.refuse("f-new-species", problem); return; }
    this.restructure(withSpecies(this.work, name), this.rxKeys);
    this.say(`Species ${name} added; its coefficients, orders and feed concentration are 0 until typed.`);
    this.root.querySelector("#f-new-species").focus();
  }

  removeSpecies(name) {
    const i = this.work.species.indexOf(name);
    // judged on what is typed now, not on the saved coefficients
    const problem = speciesRemovalProblem(this.collect(), name);
    if (problem) { this.refuse(fieldId(`species[${i}]`), problem); return; }
    this.restructure(withoutSpecies(this.work, name), this.rxKeys);
    this.say(`Species ${name} removed, from the reactions and the feed too.`);
    const next = this.root.querySelectorAll(".remove-species")[i] || this.root.querySelector("#f-new-species");
    next.focus();
  }

  // -- reactions --------------------------------------------------------------------------------------------
  reactionTools(fs, j) {
    const r = this.work.reactions[j];
    const id = `remove-reaction-${j}`;
    const button = el("button", { type: "button", id, class: "remove-reaction",
      "aria-label": `Remove reaction ${j + 1}${r.label ? ` (${r.label})` : ""}`, "aria-describedby": `${id}-err`,
      text: "Remove this reaction" });
    button.addEventListener("click", () => this.removeReaction(j));
    fs.append(el("div", { class: "reaction-tools" }, button,
      el("span", { id: `${id}-err`, class: "field-error", role: "alert", hidden: "" })));
    // errors about a whole stoichiometry or orders go beside its first field
    for (const part of ["stoichiometry", "orders"]) {
      const first = this.slots.get(`reactions[${j}].${part}.${(this.work.species || [])[0]}`);
      if (first) this.slots.set(`reactions[${j}].${part}`, first);
    }
  }

  addReactionBlock() {
    const button = el("button", { type: "button", id: "add-reaction", text: "Add a reaction" });
    button.addEventListener("click", () => this.addReaction());
    return el("div", { class: "reaction-add" }, button,
      el("span", { class: "muted small", text: " Its coefficients, orders and kinetics are typed in the new group." }));
  }

  addReaction() {
    this.restructure(withReaction(this.work), [...this.rxKeys, `r${this.serial++}`]);
    const j = this.work.reactions.length - 1;
    this.say(`Reaction ${j + 1} added; fill in its fields below the others.`);
    this.root.querySelector(`#${CSS.escape(fieldId(`reactions[${j}].label`))}`).focus();
  }

  removeReaction(j) {
    const problem = reactionRemovalProblem(this.work);
    if (problem) { this.refuse(`remove-reaction-${j}`, problem); return; }
    const label = this.work.reactions[j].label;
    this.restructure(withoutReaction(this.work, j), this.rxKeys.filter((_, i) => i !== j));
    this.say(`Reaction ${j + 1}${label ? ` (${label})` : ""} removed; the ones after it are renumbered.`);
    this.root.querySelector("#add-reaction").focus();
  }

  updateLegend(j) {
    const legend = this.root.querySelector(`[data-group="reactions[${j}]"] > legend`);
    const label = this.inputs.get(`reactions[${j}].label`).input.value.trim();
    if (legend) legend.textContent = `Reaction ${j + 1}${label ? ": " + label : ""}`;
    const button = this.root.querySelector(`#remove-reaction-${j}`);
    if (button) button.setAttribute("aria-label", `Remove reaction ${j + 1}${label ? ` (${label})` : ""}`);
  }

  // The unit of a pre-exponential factor follows the orders typed for its reaction.
  updateK0Unit(j) {
    const f = this.inputs.get(`reactions[${j}].pre_exponential`);
    if (!f) return;
    let n = 0;
    for (const s of this.work.species || []) {
      const o = this.inputs.get(`reactions[${j}].orders.${s}`);
      const t = o ? o.input.value.trim() : "";
      if (t === "") continue;
      if (!NUMBER.test(t)) return; // leave the unit until the orders are numbers again
      n += Number(t);
    }
    f.input.closest(".field").querySelector(".unit").textContent = pretty(K0_UNIT(n));
  }

  // Re-render on a changed structure, keeping what was typed in every field that is still there.
  restructure(work, rxKeys) {
    const stable = (path, keys) => path.replace(/^reactions\[(\d+)\]/, (_, j) => `reactions#${keys[Number(j)]}`);
    const typed = new Map();
    for (const [path, { input, kind }] of this.inputs)
      typed.set(stable(path, this.rxKeys), kind === "bool" ? input.checked : input.value);
    this.work = work;
    this.rxKeys = rxKeys;
    this.render();
    for (const [path, { input, kind }] of this.inputs) {
      const key = stable(path, this.rxKeys);
      if (!typed.has(key)) continue;
      if (kind === "bool") input.checked = typed.get(key); else input.value = typed.get(key);
    }
    for (let j = 0; j < this.work.reactions.length; j++) { this.updateK0Unit(j); this.updateLegend(j); }
    this.clearErrors();
  }

  refuse(id, message) {
    this.clearErrors();
    const err = this.root.querySelector(`#${CSS.escape(id)}-err`);
    err.textContent = message;
    err.hidden = false;
  }

  say(message) {
    const status = this.root.querySelector("#editor-rows-status");
    if (status) status.textContent = message;
  }

  // The document to save: the working document with every changed field as typed.
  collect() {
    const out = clone(this.work);
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
        else if (NUMBER.test(t)) value = f.unit ? `${t} ${f.unit}` : Number(t);
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
      let slot = null;
      for (const p of ancestors(path)) {
        slot = this.slots.get(p);
        if (slot) break;
        const group = this.root.querySelector(`[data-group="${CSS.escape(p)}"]`);
        const input = group && group.querySelector("input,select,textarea");
        if (input) { slot = { input, err: this.root.querySelector(`#${CSS.escape(input.id)}-err`) }; break; }
      }
      if (!slot || !slot.err) { left.push({ field, message }); continue; }
      const { input, err } = slot;
      err.textContent = err.textContent ? `${err.textContent}; ${message}` : message;
      err.hidden = false;
      if (input.tagName !== "BUTTON") input.setAttribute("aria-invalid", "true");
      first = first || input;
    }
    if (first) first.focus();
    return left;
  }

  revert() {
    this.clearErrors();
    this.reset();
    this.render();
    this.say("");
  }
}
