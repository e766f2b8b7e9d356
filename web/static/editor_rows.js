// Adding and removing species and reactions in the scenario editor: the document changes only (no DOM), so
// the rules are in one place. Every function returns a new document or a message in plain words.

// A name the page offers to add: one word, usable everywhere a species is named (stoichiometry, orders, feed,
// field names such as "feed.concentrations.MeOH"). The server accepts a little more; the page keeps to this.
const NAME = /^[A-Za-z_][A-Za-z0-9_]*$/;
const MAX_NAME = 40; // the scenario format's limit on a species name

const clone = (x) => JSON.parse(JSON.stringify(x));

// The message to show beside the new-species field, or "" when `name` can be added.
export function speciesNameProblem(name, species) {
  if (name === "") return "Type a name for the new species, e.g. B or MeOH.";
  if (!NAME.test(name))
    return `"${name}" is not a species name: use one word of letters, digits and underscores that starts with a letter, e.g. B or MeOH.`;
  if (name === "__proto__") return `"${name}" is reserved; choose another name.`;
  if (name.length > MAX_NAME) return `A species name has at most ${MAX_NAME} characters; this one has ${name.length}.`;
  if ((species || []).includes(name)) return `There is already a species named ${name}.`;
  const other = (species || []).find((s) => s.toLowerCase() === name.toLowerCase());
  if (other) return `${name} would be too easy to confuse with ${other}; choose another name.`;
  return "";
}

export function withSpecies(doc, name) {
  const out = clone(doc);
  out.species = [...(out.species || []), name];
  return out;
}

const isReactant = (v) => typeof v === "number" ? v < 0 : Number(v) < 0;

// Reactions (as [index, reaction]) whose only reactants are `name`: removing it would leave them with none.
// A reaction that has no reactant yet (a new one being filled in) is not blocked by any species.
export function reactionsLeftWithoutReactant(doc, name) {
  const out = [];
  (doc.reactions || []).forEach((r, j) => {
    const reactants = Object.entries(r.stoichiometry || {}).filter(([, v]) => isReactant(v)).map(([s]) => s);
    if (reactants.length && reactants.every((s) => s === name)) out.push([j, r]);
  });
  return out;
}

// The message refusing to remove `name` from `doc`, or "" when it can go.
export function speciesRemovalProblem(doc, name) {
  if ((doc.species || []).length <= 1) return "A scenario needs at least one species; add another before removing this one.";
  const blocked = reactionsLeftWithoutReactant(doc, name);
  if (!blocked.length) return "";
  const which = blocked.map(([j, r]) => `reaction ${j + 1}${r.label ? ` (${r.label})` : ""}`).join(" and ");
  return `${name} cannot be removed: it is the only reactant of ${which}, which would be left without a reactant. `
    + "Remove that reaction first, or give it another reactant.";
}

// `doc` without species `name`: gone from the species list, every reaction's stoichiometry and orders, the feed.
export function withoutSpecies(doc, name) {
  const out = clone(doc);
  out.species = (out.species || []).filter((s) => s !== name);
  for (const r of out.reactions || []) {
    if (r.stoichiometry) delete r.stoichiometry[name];
    if (r.orders) delete r.orders[name];
  }
  if (out.feed && out.feed.concentrations) delete out.feed.concentrations[name];
  return out;
}

// A new reaction with nothing filled in but its flag; the rest is typed in the editor (the server names every
// field still missing when the scenario is saved).
export function blankReaction() {
  return { label: "", stoichiometry: {}, orders: {}, decomposition: false };
}

export function withReaction(doc) {
  const out = clone(doc);
  out.reactions = [...(out.reactions || []), blankReaction()];
  return out;
}

export function reactionRemovalProblem(doc) {
  return (doc.reactions || []).length <= 1
    ? "A scenario needs at least one reaction; add another before removing this one." : "";
}

export function withoutReaction(doc, j) {
  const out = clone(doc);
  out.reactions = (out.reactions || []).filter((_, i) => i !== j);
  return out;
}
