// Colours of our own for the map regions. Chosen so the regions differ in lightness as well as hue
// (CIE L* about 94 pale blue-grey, 81 sand, 63 orange, 41 blue, 17 dark plum; tests/web/test_pages.py checks
// the steps), which keeps them apart for the common forms of colour blindness and in greyscale print; the
// legend always names each region in words as well.

export const REGION_COLOURS = {
  stable: "#e8eff5",
  sensitive: "#f0c36a",
  multiple: "#2e62a8",
  unstable: "#e0813f",
  runaway: "#4a1631",
};
const SPARE = ["#9aa5b1", "#6b7b8c", "#3d4a57"];

export function regionColour(key, i = 0) {
  return REGION_COLOURS[key] || SPARE[i % SPARE.length];
}

// Boundary lines: told apart by dash pattern and weight, not only by colour.
export const LINES = {
  ignition: { color: "#111111", width: 2.5, dash: "solid", label: "ignition (past it the tank can jump up)" },
  extinction: { color: "#111111", width: 2.5, dash: "dash", label: "extinction (past it the hot tank falls back)" },
  hopf: { color: "#5d2a8c", width: 2, dash: "dot", label: "onset of oscillation (Hopf)" },
  max_temperature: { color: "#b00020", width: 2, dash: "dashdot", label: "steady temperature at the maximum allowed" },
  cusp: { color: "#111111", width: 0, dash: "solid", label: "cusp (where ignition and extinction meet)" },
};
export const VALVE_DOT = "rgba(20,20,20,0.45)";
export const SETPOINT = { color: "#000000", halo: "#ffffff" };

// A stepped colourscale for category indices 0..n-1 (zmin -0.5, zmax n-0.5).
export function steppedScale(colours) {
  const n = colours.length;
  const scale = [];
  colours.forEach((c, i) => {
    scale.push([i / n, c]);
    scale.push([(i + 1) / n, c]);
  });
  return scale;
}
