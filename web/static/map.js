// The operating map: region heatmap, exact boundary curves, valve-limited dots and the setpoint marker.
// The numbers are the map answer's own; only the display units change (residence time in min, °C).

import { regionColour, LINES, VALVE_DOT, VALVE_DOT_EDGE, SETPOINT, CASING, steppedScale } from "./palette.js";
import { toMin, toC, fromMin, fromC } from "./units.js";
import { el } from "./check.js";

// Boundary curves arrive as [[tau, T_in], ...] (null entries break the line) or as a list of such segments.
export function segments(b) {
  if (!b) return [];
  if (!Array.isArray(b) && typeof b === "object") {
    const tau = b.residence_time_s || [];
    const tin = b.feed_temperature_K || [];
    return [tau.map((t, i) => [t, tin[i]])];
  }
  if (!Array.isArray(b) || b.length === 0) return [];
  const isPoint = (p) => Array.isArray(p) && p.length >= 2 && (typeof p[0] === "number" || p[0] === null);
  if (b.every((p) => p === null || isPoint(p))) {
    // a row [null, null] (or null) breaks the line
    const out = [[]];
    for (const p of b) {
      if (p === null || !Number.isFinite(p[0]) || !Number.isFinite(p[1])) out.push([]);
      else out[out.length - 1].push(p);
    }
    return out.filter((s) => s.length);
  }
  return b.flatMap((s) => segments(s));
}

// Boundary points may come as an unordered set along the curve; chain them by nearest neighbour in the
// plot's own scale (log residence time when logx, both axes normalised), breaking where a step is far longer
// than the typical one, so a line never zigzags across the map.
export function chain(pts, logx) {
  if (pts.length < 3) return [pts];
  const xs = pts.map((p) => (logx ? Math.log(p[0]) : p[0])), ys = pts.map((p) => p[1]);
  const sx = (Math.max(...xs) - Math.min(...xs)) || 1, sy = (Math.max(...ys) - Math.min(...ys)) || 1;
  const d = (a, b) => Math.hypot((xs[a] - xs[b]) / sx, (ys[a] - ys[b]) / sy);
  const walk = (start) => {
    const left = new Set(pts.map((_, i) => i));
    const order = [start];
    left.delete(start);
    while (left.size) {
      const last = order[order.length - 1];
      let best = -1, bd = Infinity;
      for (const i of left) { const v = d(last, i); if (v < bd) { bd = v; best = i; } }
      order.push(best);
      left.delete(best);
    }
    return order;
  };
  const order = walk(walk(0).at(-1));
  const steps = order.slice(1).map((k, i) => d(order[i], k)).sort((a, b) => a - b);
  const typical = steps[Math.floor(steps.length / 2)] || 0;
  const out = [[pts[order[0]]]];
  for (let i = 1; i < order.length; i++) {
    if (d(order[i - 1], order[i]) > 8 * typical + 1e-9) out.push([]);
    out[out.length - 1].push(pts[order[i]]);
  }
  return out;
}

export function isLogSpaced(v) {
  if (!v || v.length < 3 || v[0] <= 0) return false;
  const r1 = v[1] / v[0], r2 = v[v.length - 1] / v[v.length - 2];
  const d1 = v[1] - v[0], d2 = v[v.length - 1] - v[v.length - 2];
  return Math.abs(r1 - r2) < 1e-6 * r1 + 1e-3 && d2 > 1.5 * d1;
}

function grid2(g, nT, nX) {
  return Array.isArray(g) && g.length === nT && Array.isArray(g[0]) && g[0].length === nX ? g : null;
}

// Index of the grid value nearest x (v sorted ascending).
export function nearest(v, x) {
  let lo = 0, hi = v.length - 1;
  while (hi - lo > 1) {
    const mid = (lo + hi) >> 1;
    if (v[mid] < x) lo = mid; else hi = mid;
  }
  return Math.abs(v[lo] - x) <= Math.abs(v[hi] - x) ? lo : hi;
}

export function legendEntries(doc) {
  return (doc.legend || []).map((e, i) => ({ ...e, colour: regionColour(e.key, i) }));
}

// Plain-word facts of the grid cell nearest (tau [s], T_in [K]).
export function cellAt(doc, tau, tin) {
  const xs = doc.residence_time_s, ys = doc.feed_temperature_K;
  const i = nearest(ys, tin), j = nearest(xs, tau);
  const code = doc.region[i][j];
  const entry = (doc.legend || []).find((e) => e.code === code) || {};
  const sc = grid2(doc.state_count, ys.length, xs.length);
  const mt = grid2(doc.max_temperature_K, ys.length, xs.length);
  const vl = grid2(doc.valve_limited, ys.length, xs.length);
  return {
    region_key: entry.key, region_label: entry.label || String(code),
    state_count: sc ? sc[i][j] : null, max_temperature_K: mt ? mt[i][j] : null,
    valve_limited: vl ? Boolean(vl[i][j]) : null,
  };
}

export function traces(doc, setpoint) {
  const legend = legendEntries(doc);
  const index = new Map(legend.map((e, i) => [e.code, i]));
  const x = doc.residence_time_s.map(toMin);
  const y = doc.feed_temperature_K.map(toC);
  const z = doc.region.map((row) => row.map((c) => (index.has(c) ? index.get(c) : null)));
  const n = Math.max(legend.length, 1);
  const out = [{
    type: "heatmap", name: "regions", x, y, z, zmin: -0.5, zmax: n - 0.5,
    colorscale: steppedScale(legend.length ? legend.map((e) => e.colour) : ["#dddddd"]),
    showscale: false, hoverinfo: "skip", zsmooth: false,
  }];
  const vl = grid2(doc.valve_limited, y.length, x.length);
  if (vl) {
    // A sparse dot pattern over the cells where the valve cannot pass the flow (an overlay, not a region).
    const step = Math.max(1, Math.round(Math.max(x.length, y.length) / 40));
    const px = [], py = [];
    for (let i = 0; i < y.length; i += step)
      for (let j = (i / step) % 2 ? Math.floor(step / 2) : 0; j < x.length; j += step)
        if (vl[i][j]) { px.push(x[j]); py.push(y[i]); }
    out.push({ type: "scatter", mode: "markers", name: "valve_limited", x: px, y: py, hoverinfo: "skip",
      marker: { size: 3.5, color: VALVE_DOT, symbol: "circle", line: { color: VALVE_DOT_EDGE, width: 0.6 } } });
  }
  const b = doc.boundaries || {};
  for (const [key, curve] of Object.entries(b)) {
    const style = LINES[key] || { color: "#333", width: 1.5, dash: "dot" };
    const logx = doc.spacing ? doc.spacing === "log" : isLogSpaced(doc.residence_time_s);
    segments(curve).flatMap((s) => (key === "cusp" ? [s] : chain(s, logx))).forEach((pts, k) => {
      if (!pts.length) return;
      const asPoint = key === "cusp" || pts.length === 1;
      if (!asPoint) {
        // the white casing under the line: visible on every region colour, the darkest included
        out.push({
          type: "scatter", name: `casing:${key}:${k}`, x: pts.map((p) => toMin(p[0])), y: pts.map((p) => toC(p[1])),
          mode: "lines", hoverinfo: "skip", line: { color: CASING.color, width: style.width + CASING.extra },
        });
      }
      out.push({
        type: "scatter", name: `boundary:${key}:${k}`, x: pts.map((p) => toMin(p[0])), y: pts.map((p) => toC(p[1])),
        mode: asPoint ? "markers" : "lines", hoverinfo: "skip",
        line: { color: style.color, width: style.width, dash: style.dash },
        marker: { symbol: "diamond", size: 10, color: style.color, line: { color: "#fff", width: 1.5 } },
      });
    });
  }
  out.push(setpointHalo(setpoint), setpointTrace(setpoint));
  return out;
}

// A white ring under the setpoint mark, so the mark shows on the dark regions.
function setpointHalo(sp) {
  return {
    type: "scatter", mode: "markers", name: "setpoint-halo", hoverinfo: "skip", cliponaxis: false,
    x: sp ? [toMin(sp.residence_time)] : [], y: sp ? [toC(sp.feed_temperature)] : [],
    marker: { symbol: "circle-open", size: 20, color: SETPOINT.halo, line: { width: 4, color: SETPOINT.halo } },
  };
}

function setpointTrace(sp) {
  return {
    type: "scatter", mode: "markers", name: "setpoint", hoverinfo: "skip", cliponaxis: false,
    x: sp ? [toMin(sp.residence_time)] : [], y: sp ? [toC(sp.feed_temperature)] : [],
    marker: { symbol: "circle-x-open", size: 16, color: SETPOINT.color, line: { width: 3, color: SETPOINT.color } },
  };
}

// Readable ticks of a log axis over [lo, hi] (in the axis' own unit): 1, 2, 5, 10, 20, 50, ...; every whole
// number of a decade when the window is narrower than that gives at least three ticks.
export function logTicks(lo, hi) {
  const pick = (mult) => {
    const out = [];
    for (let e = Math.floor(Math.log10(lo)) - 1; e <= Math.ceil(Math.log10(hi)); e++) {
      for (const m of mult) {
        const v = Number((m * 10 ** e).toPrecision(6));
        if (v >= lo * (1 - 1e-9) && v <= hi * (1 + 1e-9)) out.push(v);
      }
    }
    return out;
  };
  let vals = pick([1, 2, 5]);
  if (vals.length < 3) vals = pick([1, 2, 3, 4, 5, 6, 7, 8, 9]);
  return { tickvals: vals, ticktext: vals.map((v) => String(v)) };
}

export function layout(doc, { height = 430, title = "" } = {}) {
  const logx = doc.spacing ? doc.spacing === "log" : isLogSpaced(doc.residence_time_s);
  const xs = doc.residence_time_s.map(toMin), ys = doc.feed_temperature_K.map(toC);
  const half = (v, k) => (v.length > 1 ? (v[k === 0 ? 1 : v.length - 1] - v[k === 0 ? 0 : v.length - 2]) / 2 : 0.5);
  const xr = logx
    ? [Math.log10(xs[0]) - (Math.log10(xs[1]) - Math.log10(xs[0])) / 2,
       Math.log10(xs[xs.length - 1]) + (Math.log10(xs[1]) - Math.log10(xs[0])) / 2]
    : [xs[0] - half(xs, 0), xs[xs.length - 1] + half(xs, 1)];
  return {
    title: title ? { text: title, font: { size: 14 } } : undefined,
    height, margin: { l: 62, r: 14, t: title ? 34 : 10, b: 48 },
    xaxis: { title: { text: "Residence time [min]" }, type: logx ? "log" : "linear", range: xr, fixedrange: true,
      ...(logx ? { tickmode: "array", ...logTicks(10 ** xr[0], 10 ** xr[1]) } : {}),
      showgrid: false, ticks: "outside" },
    yaxis: { title: { text: "Feed temperature [°C]" }, range: [ys[0] - half(ys, 0), ys[ys.length - 1] + half(ys, 1)],
      fixedrange: true, showgrid: false, ticks: "outside" },
    showlegend: false, dragmode: false, hovermode: false, plot_bgcolor: "#ffffff",
    font: { family: "system-ui, sans-serif", size: 12 },
  };
}

// Data coordinates (tau [s], T_in [K]) of a pointer event, or null outside the plot area.
function pointerToData(gd, ev) {
  const cover = gd.querySelector(".nsewdrag");
  if (!cover) return null;
  const r = cover.getBoundingClientRect();
  const fx = (ev.clientX - r.left) / r.width, fy = (ev.clientY - r.top) / r.height;
  if (fx < 0 || fx > 1 || fy < 0 || fy > 1) return null;
  const xa = gd._fullLayout.xaxis, ya = gd._fullLayout.yaxis;
  let xv = xa.range[0] + fx * (xa.range[1] - xa.range[0]);
  if (xa.type === "log") xv = 10 ** xv;
  const yv = ya.range[1] - fy * (ya.range[1] - ya.range[0]);
  return { residence_time: fromMin(xv), feed_temperature: fromC(yv) };
}

// Draw the map into el; callbacks get SI coordinates. Returns {setSetpoint}.
export async function drawMap(Plotly, el, doc, setpoint, { onPick, onPreview, onHover, staticPlot = false,
  height } = {}) {
  const data = traces(doc, setpoint);
  for (const n of el.querySelectorAll(".map-placeholder, .map-preview")) n.remove();
  el._exomapBase = data.length;
  await Plotly.react(el, [...data, ...(el._exomapExtra || [])], layout(doc, { height: height || el.clientHeight || 360 }),
    { displayModeBar: false, responsive: true, staticPlot });
  const spIndex = data.length - 1;
  const setSetpoint = (sp) => {
    const x = [toMin(sp.residence_time)], y = [toC(sp.feed_temperature)];
    return Plotly.restyle(el, { x: [x, x], y: [y, y] }, [spIndex - 1, spIndex]);
  };
  if (!staticPlot && !el.dataset.wired) {
    el.dataset.wired = "1";
    let dragging = false;
    // a finger moves the setpoint only in the map's move mode; otherwise a touch scrolls the page, and a tap
    // without movement reads the map there
    const touchMoves = (ev) => ev.pointerType !== "touch" || el.classList.contains("move-mode");
    let tap = null;
    el.addEventListener("pointerdown", (ev) => {
      const p = pointerToData(el, ev);
      if (!p || ev.button !== 0) return;
      if (!touchMoves(ev)) { tap = { x: ev.clientX, y: ev.clientY, p }; return; }
      dragging = true;
      el.setPointerCapture?.(ev.pointerId);
      el._exomap.setSetpoint(p);
      el._exomap.onPreview?.(p);
      ev.preventDefault();
    });
    el.addEventListener("pointermove", (ev) => {
      const p = pointerToData(el, ev);
      if (dragging && p) { el._exomap.setSetpoint(p); el._exomap.onPreview?.(p); }
      else if (p && ev.pointerType !== "touch") el._exomap.onHover?.(p);
    });
    const end = (ev) => {
      if (tap) {
        if (Math.hypot(ev.clientX - tap.x, ev.clientY - tap.y) < 10) el._exomap.onHover?.(tap.p);
        tap = null;
      }
      if (!dragging) return;
      dragging = false;
      const p = pointerToData(el, ev);
      if (p) el._exomap.onPick?.(p);
    };
    el.addEventListener("pointerup", end);
    el.addEventListener("pointercancel", () => { dragging = false; tap = null; });
  }
  el._exomap = { doc, setSetpoint, onPick, onPreview, onHover };
  return el._exomap;
}

// Traces of other panels drawn over the map (e.g. the plant's path), after the map's own traces, so the
// setpoint's trace indices stay fixed; they are kept across redraws of the map.
export async function setExtraTraces(Plotly, el, extra) {
  el._exomapExtra = extra;
  if (el._exomapBase === undefined || !el.data) return;
  await Plotly.react(el, [...el.data.slice(0, el._exomapBase), ...extra], el.layout);
}

// A still picture of the map (regions, boundaries, setpoint) on a canvas, drawn from the same answer while
// plotly's bundle is still loading; plotly's chart replaces it. Same plot margins, so nothing jumps.
export function drawPreview(el, doc, setpoint) {
  const w = el.clientWidth, h = el.clientHeight || 360;
  if (!w || !doc.residence_time_s || doc.residence_time_s.length < 2) return false;
  const m = { l: 62, r: 14, t: 10, b: 48 };
  const canvas = document.createElement("canvas");
  canvas.className = "map-preview";
  canvas.width = w;
  canvas.height = h;
  canvas.setAttribute("aria-label", "Operating map (still picture while the interactive chart loads)");
  const g = canvas.getContext("2d");
  const lay = layout(doc, { height: h });
  const logx = lay.xaxis.type === "log";
  const [x0, x1] = lay.xaxis.range, [y0, y1] = lay.yaxis.range;
  const px = (tauS) => m.l + ((logx ? Math.log10(toMin(tauS)) : toMin(tauS)) - x0) / (x1 - x0) * (w - m.l - m.r);
  const py = (K) => m.t + (y1 - toC(K)) / (y1 - y0) * (h - m.t - m.b);
  const xs = doc.residence_time_s, ys = doc.feed_temperature_K;
  const colour = new Map(legendEntries(doc).map((e) => [e.code, e.colour]));
  const edge = (v, k, f) => (k === 0 ? f(v[0]) - (f(v[1]) - f(v[0])) / 2 : k === v.length ? f(v[k - 1]) + (f(v[k - 1]) - f(v[k - 2])) / 2
    : (f(v[k - 1]) + f(v[k])) / 2);
  for (let i = 0; i < ys.length; i++) {
    const top = edge(ys, i + 1, py), bottom = edge(ys, i, py);
    for (let j = 0; j < xs.length; j++) {
      const left = edge(xs, j, px), right = edge(xs, j + 1, px);
      g.fillStyle = colour.get(doc.region[i][j]) || "#dddddd";
      const x = Math.floor(left), y = Math.floor(top);
      g.fillRect(x, y, Math.ceil(right) - x, Math.ceil(bottom) - y);
    }
  }
  for (const [key, curve] of Object.entries(doc.boundaries || {})) {
    if (key === "cusp") continue;
    const style = LINES[key] || { color: "#333", width: 1.5, dash: "dot" };
    for (const pts of segments(curve).flatMap((s) => chain(s, logx))) {
      for (const [colour, width, dash] of [[CASING.color, style.width + CASING.extra, []],
        [style.color, style.width, { solid: [], dash: [8, 4], dot: [2, 3], dashdot: [8, 3, 2, 3] }[style.dash] || []]]) {
        g.strokeStyle = colour;
        g.lineWidth = width;
        g.setLineDash(dash);
        g.beginPath();
        pts.forEach((p, k) => (k ? g.lineTo(px(p[0]), py(p[1])) : g.moveTo(px(p[0]), py(p[1]))));
        g.stroke();
      }
    }
  }
  if (setpoint) {
    g.setLineDash([]);
    g.strokeStyle = SETPOINT.color;
    g.lineWidth = 3;
    g.beginPath();
    g.arc(px(setpoint.residence_time), py(setpoint.feed_temperature), 7, 0, 2 * Math.PI);
    g.stroke();
  }
  g.fillStyle = "#5b6570";
  g.font = "12px system-ui, sans-serif";
  g.fillText("Loading the interactive chart…", m.l + 6, h - 8);
  el.textContent = "";
  el.append(canvas);
  return true;
}

// The map's legend, the same on the page and the print sheet: each region in words, every boundary line drawn
// (with its casing), the cusp, the valve dots when the map has any, and the setpoint mark.
export function renderMapLegend(ul, doc) {
  ul.textContent = "";
  for (const e of legendEntries(doc)) {
    ul.append(el("li", { "data-key": e.key }, el("span", { class: "swatch", style: `background:${e.colour}` }),
      el("span", { text: e.label })));
  }
  const b = doc.boundaries || {};
  const dashes = { solid: "", dash: "6 3", dot: "2 3", dashdot: "7 3 2 3" };
  for (const [key, style] of Object.entries(LINES)) {
    const curve = b[key];
    if (!curve || (Array.isArray(curve) && !curve.length)) continue;
    const sw = key === "cusp"
      ? `<svg width="28" height="12" aria-hidden="true"><path d="M14 1 L20 6 L14 11 L8 6Z" fill="${style.color}" stroke="#fff" stroke-width="1"/></svg>`
      : `<svg width="28" height="12" aria-hidden="true"><line x1="1" y1="6" x2="27" y2="6" stroke="${CASING.color}" stroke-width="${style.width + CASING.extra}"/><line x1="1" y1="6" x2="27" y2="6" stroke="${style.color}" stroke-width="${style.width}" stroke-dasharray="${dashes[style.dash]}"/></svg>`;
    const li = el("li", { "data-key": `line:${key}` });
    li.innerHTML = sw;
    li.append(el("span", { text: style.label }));
    ul.append(li);
  }
  if (Array.isArray(doc.valve_limited) && doc.valve_limited.some((r) => r.some(Boolean))) {
    const li = el("li", { "data-key": "valve_limited" });
    li.innerHTML = `<svg width="28" height="12" aria-hidden="true">${[6, 14, 22].map((x) => `<circle cx="${x}" cy="6" r="1.8" fill="${VALVE_DOT}" stroke="${VALVE_DOT_EDGE}" stroke-width="0.6"/>`).join("")}</svg>`;
    li.append(el("span", { text: "dots: the outlet valve cannot pass this flow at the set level within its usable opening" }));
    ul.append(li);
  }
  const li = el("li", { "data-key": "setpoint" });
  li.innerHTML = `<svg width="28" height="14" aria-hidden="true"><circle cx="14" cy="7" r="5" fill="none" stroke="#000" stroke-width="2"/><path d="M10.5 3.5 L17.5 10.5 M17.5 3.5 L10.5 10.5" stroke="#000" stroke-width="1.6"/></svg>`;
  li.append(el("span", { text: "setpoint" }));
  ul.append(li);
}
