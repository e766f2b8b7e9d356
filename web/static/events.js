// The custom-events form: one event a line, in words, turned into the API's event objects.
//   at 10 min set feed_temperature to 45 °C
//   at 10 min add feed_temperature 10 K
//   at 30 min scale feed_flow by 1.5
//   at 1 h ramp coolant_temperature to 40 °C over 20 min
//   at 5 min do feed_stop
// A line may also be one JSON event object ({"at": 600, "do": "cooling_loss"}). Values keep their units as
// typed; the server converts them.

export const QUANTITIES = ["feed_flow", "feed_temperature", "feed_concentration.<species>", "coolant_temperature",
  "valve_opening", "level_setpoint"];
export const ACTIONS = ["feed_stop", "feed_restart", "outlet_block", "outlet_unblock", "cooling_loss",
  "cooling_restore", "valve_manual", "valve_auto"];

const val = (s) => (/^[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?$/.test(s.trim()) ? Number(s) : s.trim());

// Lines -> event objects; throws Error naming the line.
export function parseEventLines(text) {
  const out = [];
  String(text).split("\n").forEach((raw, i) => {
    const line = raw.trim();
    if (!line || line.startsWith("#")) return;
    if (line.startsWith("{")) {
      try { out.push(JSON.parse(line)); } catch { throw new Error(`Line ${i + 1}: not a valid JSON event.`); }
      return;
    }
    const m = line.match(/^at\s+(.+?)\s+(set|add|scale|ramp|do)\s+(.+)$/i);
    if (!m) throw new Error(`Line ${i + 1}: start with "at <time>" and then set, add, scale, ramp or do.`);
    const at = val(m[1]), verb = m[2].toLowerCase(), rest = m[3].trim();
    let r;
    if (verb === "do") {
      out.push({ at, do: rest });
    } else if (verb === "set" && (r = rest.match(/^(\S+)\s+to\s+(.+)$/i))) {
      out.push({ at, set: r[1], to: val(r[2]) });
    } else if (verb === "add" && (r = rest.match(/^(\S+)\s+(?:by\s+)?(.+)$/i))) {
      out.push({ at, add: r[1], value: val(r[2]) });
    } else if (verb === "scale" && (r = rest.match(/^(\S+)\s+by\s+(.+)$/i))) {
      out.push({ at, scale: r[1], by: val(r[2]) });
    } else if (verb === "ramp" && (r = rest.match(/^(\S+)\s+to\s+(.+?)\s+over\s+(.+)$/i))) {
      out.push({ at, ramp: r[1], to: val(r[2]), over: val(r[3]) });
    } else {
      throw new Error(`Line ${i + 1}: could not read "${line}". See the event help.`);
    }
  });
  return out;
}

// Event objects -> lines (to show an upset's events in the form).
export function eventLines(events) {
  return (events || []).map((e) => {
    if (e.do) return `at ${e.at} do ${e.do}`;
    if (e.set) return `at ${e.at} set ${e.set} to ${e.to}`;
    if (e.add) return `at ${e.at} add ${e.add} ${e.value}`;
    if (e.scale) return `at ${e.at} scale ${e.scale} by ${e.by}`;
    if (e.ramp) return `at ${e.at} ramp ${e.ramp} to ${e.to} over ${e.over}`;
    return JSON.stringify(e);
  }).join("\n");
}

export function helpHTML() {
  return `<p>One event a line. Times and values take units (s, min, h; °C, K; m³/h, L/min, gpm; mol/L).</p>
<ul>
<li><code>at 10 min set feed_temperature to 45 °C</code> — jumps to a value</li>
<li><code>at 10 min add feed_temperature 10 K</code> — jumps by an amount</li>
<li><code>at 30 min scale feed_flow by 1.5</code> — multiplied by a factor</li>
<li><code>at 1 h ramp coolant_temperature to 40 °C over 20 min</code> — moves linearly</li>
<li><code>at 5 min do feed_stop</code> — a plant action</li>
</ul>
<p>Quantities: ${QUANTITIES.map((q) => `<code>${q}</code>`).join(", ")}.</p>
<p>Actions: ${ACTIONS.map((q) => `<code>${q}</code>`).join(", ")}.</p>`;
}
