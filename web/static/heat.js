// Heat generation and removal against tank temperature at a setpoint, from the scenario document (SI values).
//
// At residence time tau and feed temperature T_in the volume is the level-setpoint volume V = (pi D^2/4) h_set
// and the throughflow q = V / tau. For a tank temperature T held fixed, the steady composition follows from the
// species balances written in reaction extents xi_j [mol/m^3]:
//     C_i = C_i,in + sum_j nu_ij xi_j,      xi_j = tau * r_j(C, T),      r_j = k0_j exp(-Ea_j/(R T)) prod_i C_i^n_ij
// and then
//     generation G(T) = V * sum_j (-dH_j) * xi_j / tau                                  [W]
//     removal    R(T) = rho cp q (T - T_in) + UA_jacket (T - T_c) + UA_loss (T - T_amb) - P_agitator   [W]
// Steady states are the crossings G(T) = R(T) (DESIGN.md §2, energy balance at steady state).
// Each xi_j is found by bisection with the others held (Gauss-Seidel sweeps): for positive orders in the
// reactants the residual xi_j - tau r_j is increasing in xi_j, so each one-dimensional root is unique.

export const R_GAS = 8.314462618; // J/(mol K), CODATA 2018 (exact since the 2019 SI)

const num = (v, what) => {
  if (typeof v !== "number" || !Number.isFinite(v)) throw new Error(`the scenario's ${what} is not a plain SI number`);
  return v;
};

// Plain SI inputs of the heat balance from a canonical scenario document.
export function heatInputs(doc) {
  const species = doc.species;
  const D = num(doc.vessel.diameter, "vessel.diameter");
  const h = num(doc.vessel.level_setpoint, "vessel.level_setpoint");
  const rx = doc.reactions.map((r, j) => ({
    nu: species.map((s) => (r.stoichiometry && r.stoichiometry[s]) || 0),
    n: species.map((s) => (r.orders && r.orders[s]) || 0),
    k0: num(r.pre_exponential, `reactions[${j}].pre_exponential`),
    Ea: num(r.activation_energy, `reactions[${j}].activation_energy`),
    dH: num(r.reaction_enthalpy, `reactions[${j}].reaction_enthalpy`),
  }));
  const j = doc.jacket || null, l = doc.heat_loss || null;
  return {
    V: (Math.PI * D * D / 4) * h,
    rho: num(doc.liquid.density, "liquid.density"),
    cp: num(doc.liquid.heat_capacity, "liquid.heat_capacity"),
    c_in: species.map((s) => (doc.feed.concentrations && doc.feed.concentrations[s]) || 0),
    reactions: rx,
    UA_jacket: j ? num(j.ua, "jacket.ua") : 0, T_c: j ? num(j.coolant_temperature, "jacket.coolant_temperature") : 0,
    UA_loss: l ? num(l.ua, "heat_loss.ua") : 0, T_amb: l ? num(l.ambient_temperature, "heat_loss.ambient_temperature") : 0,
    P_agitator: typeof doc.agitator_power === "number" ? doc.agitator_power : 0,
  };
}

function rate(r, C, T) {
  let v = r.k0 * Math.exp(-r.Ea / (R_GAS * T));
  for (let i = 0; i < C.length; i++) if (r.n[i]) v *= Math.max(C[i], 0) ** r.n[i];
  return v;
}

// Steady extents [mol/m^3] of every reaction at fixed T and tau (start: a previous solution).
export function extents(inp, tau, T, start) {
  const m = inp.reactions.length, ns = inp.c_in.length;
  const xi = start ? start.slice() : new Array(m).fill(0);
  const conc = () => inp.c_in.map((c, i) => c + inp.reactions.reduce((s, r, k) => s + r.nu[i] * xi[k], 0));
  for (let sweep = 0; sweep < (m === 1 ? 1 : 200); sweep++) {
    let change = 0;
    for (let k = 0; k < m; k++) {
      const r = inp.reactions[k];
      const others = inp.c_in.map((c, i) => c + inp.reactions.reduce((s, rr, kk) => s + (kk === k ? 0 : rr.nu[i] * xi[kk]), 0));
      let hi = Infinity;
      for (let i = 0; i < ns; i++) if (r.nu[i] < 0) hi = Math.min(hi, Math.max(others[i], 0) / -r.nu[i]);
      if (!Number.isFinite(hi)) hi = 0;
      const f = (x) => x - tau * rate(r, others.map((c, i) => c + r.nu[i] * x), T);
      let lo = 0, up = hi;
      if (f(lo) >= 0) { up = 0; }
      for (let it = 0; it < 200 && up - lo > 1e-13 * (1 + up); it++) {
        const mid = 0.5 * (lo + up);
        if (f(mid) > 0) up = mid; else lo = mid;
      }
      const x = 0.5 * (lo + up);
      change = Math.max(change, Math.abs(x - xi[k]));
      xi[k] = x;
    }
    if (change <= 1e-12 * (1 + Math.max(...xi.map(Math.abs)))) break;
  }
  return { xi, C: conc() };
}

// Curves on n temperatures from T_lo to T_hi [K]: {T, generation_W, removal_W}.
export function heatCurves(inp, tau, T_in, T_lo, T_hi, n = 240) {
  const q = inp.V / tau;
  const T = [], G = [], R = [];
  let start = null;
  for (let i = 0; i < n; i++) {
    const t = T_lo + (T_hi - T_lo) * i / (n - 1);
    const { xi } = extents(inp, tau, t, start);
    start = xi;
    T.push(t);
    G.push(inp.V * inp.reactions.reduce((s, r, k) => s + -r.dH * xi[k], 0) / tau);
    R.push(inp.rho * inp.cp * q * (t - T_in) + inp.UA_jacket * (t - inp.T_c) + inp.UA_loss * (t - inp.T_amb)
      - inp.P_agitator);
  }
  return { T, generation_W: G, removal_W: R };
}

// Adiabatic temperature rise of the feed [K]: sum_j (-dH_j) * (extent of j if its first reactant ran out) / (rho cp),
// used only to pick the temperature window of the chart.
export function windowFor(inp, T_in, T_max) {
  let rise = 0;
  for (const r of inp.reactions) {
    let xmax = Infinity;
    r.nu.forEach((v, i) => { if (v < 0) xmax = Math.min(xmax, inp.c_in[i] / -v); });
    if (Number.isFinite(xmax)) rise += Math.max(-r.dH, 0) * xmax / (inp.rho * inp.cp);
  }
  const lo = Math.min(T_in, inp.UA_jacket ? inp.T_c : T_in) - 10;
  const hi = Math.max(T_in + 1.15 * rise + 10, T_max ? T_max + 10 : 0);
  return [lo, hi];
}
