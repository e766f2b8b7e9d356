// The home page: demo and saved scenarios, new-from-demo, and import of a scenario file.

import * as urls from "./urls.js";
import { getJSON, postJSON, showProblem, wireProblemBox } from "./api.js";
import { el } from "./check.js";
import { plainText } from "./units.js";

const $ = (id) => document.getElementById(id);

function item(s, all = []) {
  const li = el("li", { class: "scenario-item", "data-id": s.id });
  li.append(el("a", { href: urls.scenarioPage(s.id), class: "scenario-link", text: s.title || s.name || s.id }));
  if (s.derived_from) {
    // lineage: the scenario this one was saved from, and a side-by-side of the change
    const origin = all.find((o) => o.id === s.derived_from);
    li.append(el("p", { class: "small derived-from" }, "derived from ",
      el("a", { href: urls.scenarioPage(s.derived_from), text: origin ? origin.title || origin.name || origin.id : s.derived_from }),
      " · ", el("a", { class: "compare-original", href: urls.comparePage({ a: s.derived_from, b: s.id }), text: "compare" })));
  }
  if (s.description) li.append(el("p", { class: "muted small", text: plainText(s.description) }));
  const meta = el("p", { class: "small" }, el("code", { text: s.id }));
  if (s.demo) {
    meta.append(" · ", el("a", { href: urls.scenarioPage(s.id, { panel: "editor" }), class: "new-from-demo",
      text: "New scenario from this demo", "aria-label": `New scenario from the demo ${s.title || s.name}` }));
  }
  li.append(meta);
  return li;
}

async function list() {
  try {
    const ans = await getJSON(urls.apiScenarios(), "Listing scenarios");
    const all = ans.scenarios || [];
    for (const [node, wanted] of [[$("demo-list"), true], [$("saved-list"), false]]) {
      node.textContent = "";
      const mine = all.filter((s) => Boolean(s.demo) === wanted);
      for (const s of mine) node.append(item(s, all));
      if (!mine.length) node.append(el("li", { class: "muted", text: wanted ? "No demo scenarios are installed."
        : "None yet. Edit a demo and save it, or import a file." }));
    }
  } catch (e) {
    showProblem(e);
  }
}

async function importFile(file) {
  const err = $("import-error"), fields = $("import-fields");
  err.hidden = true;
  fields.textContent = "";
  let doc;
  try {
    doc = JSON.parse(await file.text());
  } catch {
    err.textContent = `${file.name} is not a JSON file.`;
    err.hidden = false;
    return;
  }
  const headers = {};
  const token = sessionStorage.getItem("exomap-token");
  if (token) headers.Authorization = `Bearer ${token}`;
  try {
    const saved = await postJSON(urls.apiScenarios(), doc, "Checking and saving the scenario", headers);
    window.location.assign(urls.scenarioPage(saved.id));
  } catch (e) {
    if (e.status === 401) {
      const t = window.prompt("Saving on this server needs its access token:");
      if (t) { sessionStorage.setItem("exomap-token", t); return importFile(file); }
    }
    err.textContent = `The file was not imported: ${e.message}`;
    err.hidden = false;
    for (const f of e.fields || []) fields.append(el("li", {}, el("code", { text: f.field }), `: ${f.message}`));
  }
}

wireProblemBox();
$("import-file").addEventListener("change", (ev) => { const f = ev.target.files[0]; if (f) importFile(f); });
list();
