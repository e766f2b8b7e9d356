// Calls to the JSON API: a progress note for any wait past 300 ms, and every failure in plain words.

const SLOW_MS = 300;
let busy = 0;
const labels = new Map();
let nextId = 1;

function showStatus() {
  const box = document.getElementById("status");
  if (!box) return;
  const text = [...labels.values()].filter(Boolean);
  box.hidden = text.length === 0;
  const t = document.getElementById("status-text");
  if (t) t.textContent = text.length ? text.join("; ") + "…" : "";
  document.body.toggleAttribute("data-busy", busy > 0);
}

// An error the page can show as is: .message in plain words, .fields [{field, message}], .status, .code.
export class ApiError extends Error {
  constructor(message, { status = 0, code = "", fields = [] } = {}) {
    super(message);
    this.status = status;
    this.code = code;
    this.fields = fields;
  }
}

async function toError(resp) {
  let body = null;
  try { body = await resp.json(); } catch { body = null; }
  const e = body && body.error;
  if (e && e.message) return new ApiError(e.message, { status: resp.status, code: e.code, fields: e.fields || [] });
  const plain = {
    400: "The request was not understood.", 401: "Saving needs the access token of this server.",
    404: "Not found: the scenario or page does not exist on this server.", 413: "The request is too large.",
    422: "Some values are not valid.", 503: "The server is busy or the computation took too long; try again.",
  };
  return new ApiError(plain[resp.status] || `The server answered with an error (${resp.status}).`,
    { status: resp.status });
}

// fetch JSON with a label shown after SLOW_MS ("Computing the map"); throws ApiError.
export async function request(url, { method = "GET", body, label = "Working", headers = {}, as = "json" } = {}) {
  const done = busyFor(label);
  try {
    const opts = { method, headers: { Accept: "application/json", ...headers } };
    if (body !== undefined) {
      opts.body = JSON.stringify(body);
      opts.headers["Content-Type"] = "application/json";
    }
    let resp;
    try {
      resp = await fetch(url, opts);
    } catch {
      throw new ApiError("The server cannot be reached. Is exomap still running?");
    }
    if (!resp.ok) throw await toError(resp);
    return as === "text" ? await resp.text() : await resp.json();
  } finally {
    done();
  }
}

export const getJSON = (url, label) => request(url, { label });
export const postJSON = (url, body, label, headers) => request(url, { method: "POST", body, label, headers });

// A message banner for errors that belong to no field.
export function showProblem(err) {
  const box = document.getElementById("problem");
  if (!box) return;
  if (!err) { box.hidden = true; return; }
  const msg = err instanceof ApiError || err instanceof Error ? err.message : String(err);
  document.getElementById("problem-text").textContent = msg;
  box.hidden = false;
}

export function wireProblemBox() {
  const close = document.getElementById("problem-close");
  if (close) close.addEventListener("click", () => showProblem(null));
}

export function boot() {
  const el = document.getElementById("boot");
  return el ? JSON.parse(el.textContent) : {};
}

// Show `label` as progress if the work is still going after SLOW_MS; call the returned function when done.
export function busyFor(label) {
  const id = nextId++;
  busy++;
  const timer = setTimeout(() => { labels.set(id, label); showStatus(); }, SLOW_MS);
  return () => { clearTimeout(timer); busy--; labels.delete(id); showStatus(); };
}

// Plotly's bundle, run on demand: a page that preloads it (<link rel=preload>) calls this when it can spare the
// main thread for the bundle; a page with its own <script> tag only waits.
export function plotlyReady() {
  if (window.Plotly) return Promise.resolve(window.Plotly);
  const src = boot().plotly_url;
  if (src && !document.querySelector("script[data-plotly]") && ![...document.scripts].some((s) => s.src.endsWith(src))) {
    const tag = document.createElement("script");
    tag.src = src;
    tag.dataset.plotly = "1";
    document.head.append(tag);
  }
  const done = busyFor("Loading the chart library");
  return new Promise((resolve, reject) => {
    const started = Date.now();
    const tick = () => {
      if (window.Plotly) { done(); resolve(window.Plotly); }
      else if (Date.now() - started > 30000) { done(); reject(new ApiError("The chart library did not load.")); }
      else setTimeout(tick, 25);
    };
    tick();
  });
}
