// Colours of our own for the map regions. Their lightness falls with the hazard in even steps, so the regions
// stay apart in greyscale print and for the common forms of colour blindness: grey values (Rec. 709 luma of
// the sRGB values, what a greyscale printer or CSS grayscale() makes of them) about 242 pale blue-grey,
// 197 sand, 153 mid blue, 98 rust, 29 dark plum, 44 or more apart (tests/web/test_pages.py checks the steps,
// tests/browser/test_review.py a greyscale screenshot). The legend names each region in words as well.

export const REGION_COLOURS = {
  stable: "#eef3f7",
  sensitive: "#e9c46a",
  multiple: "#6f9fd6",
  unstable: "#a8541f",
  runaway: "#3b1230",
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
export const VALVE_DOT = "rgba(20,20,20,0.55)";
// a light edge round each valve dot, so the dots show on the dark regions too
export const VALVE_DOT_EDGE = "rgba(255,255,255,0.8)";
export const SETPOINT = { color: "#000000", halo: "#ffffff" };
// Every boundary line is drawn over a white casing this much wider than itself, so each line (the maximum-
// temperature line in particular) stays visible on every region colour, the darkest included.
export const CASING = { color: "#ffffff", extra: 3 };

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
