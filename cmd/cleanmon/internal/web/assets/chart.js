// Time charts drawn as SVG by hand: a log or linear value axis, a time
// axis on the site's clock, lines that break across gaps in the data, a min–max
// band, threshold lines with their names, and a readout under the pointer.
// Each series differs in dash pattern and marker shape as well as colour,
// so that a chart reads in monochrome. A year of hourly points (8 760 per
// series) is one path element per series.

import { el, svgEl, num, wallParts, fromWall, offsetMinutes, timeText } from "./common.js";

const W = 1000;
const H = 330;
// The right margin holds the threshold labels ("action 280 000").
const M = { left: 78, right: 150, top: 30, bottom: 40 };

// Series styles: colour, dash pattern and marker shape.
const STYLES = [
  { color: "#1f4e9c", dash: "", marker: "circle" },
  { color: "#b5470b", dash: "9 4", marker: "square" },
  { color: "#2e7d32", dash: "3 3", marker: "triangle" },
  { color: "#6a1b9a", dash: "12 3 3 3", marker: "diamond" },
  { color: "#00838f", dash: "6 2 2 2 2 2", marker: "cross" },
  { color: "#5d4037", dash: "2 5", marker: "circle" },
];

// Threshold lines: the limit solid and heavy, action and alert dashed.
const THRESHOLDS = {
  limit: { cls: "th-limit", dash: "" },
  action: { cls: "th-action", dash: "12 5" },
  alert: { cls: "th-alert", dash: "4 4" },
  min: { cls: "th-limit", dash: "" },
  zero: { cls: "th-zero", dash: "2 3" },
};

const MINUTE = 60e3;
const HOUR = 60 * MINUTE;
const DAY = 24 * HOUR;
const TIME_STEPS = [MINUTE, 2 * MINUTE, 5 * MINUTE, 10 * MINUTE, 15 * MINUTE, 30 * MINUTE, HOUR, 2 * HOUR, 3 * HOUR, 6 * HOUR, 12 * HOUR, DAY, 2 * DAY, 7 * DAY, 14 * DAY, 30 * DAY, 91 * DAY];

function compact(v) {
  const a = Math.abs(v);
  if (a >= 1e9) return v / 1e9 + " G";
  if (a >= 1e6) return v / 1e6 + " M";
  if (a >= 1e4) return v / 1e3 + " k";
  return num(v);
}

function logAxis(lo, hi) {
  let dlo = Math.floor(Math.log10(lo));
  let dhi = Math.ceil(Math.log10(hi));
  if (dhi <= dlo) dhi = dlo + 1;
  const ticks = [];
  for (let d = dlo; d <= dhi; d++) ticks.push({ v: 10 ** d, label: compact(10 ** d) });
  const span = dhi - dlo;
  return {
    ticks,
    y: (v) => (v > 0 ? M.top + (H - M.top - M.bottom) * (1 - (Math.log10(v) - dlo) / span) : H - M.bottom),
  };
}

function linearAxis(lo, hi) {
  if (hi <= lo) {
    hi = lo + 1;
    lo -= 1;
  }
  const raw = (hi - lo) / 6;
  const p = 10 ** Math.floor(Math.log10(raw));
  const step = [1, 2, 2.5, 5, 10].map((m) => m * p).find((s) => s >= raw);
  const a = Math.floor(lo / step) * step;
  const b = Math.ceil(hi / step) * step;
  const ticks = [];
  for (let v = a; v <= b + step / 2; v += step) ticks.push({ v, label: num(Math.round(v / step) * step) });
  return { ticks, y: (v) => M.top + (H - M.top - M.bottom) * (1 - (v - a) / (b - a)) };
}

// timeTicks places ticks on the site's clock: months on the 1st, days at
// midnight, hours and minutes on round wall-clock values.
function timeTicks(from, to) {
  const span = to - from;
  const step = TIME_STEPS.find((s) => span / s <= 8) || TIME_STEPS[TIME_STEPS.length - 1];
  const out = [];
  const w = wallParts(from);
  if (step >= 30 * DAY) {
    const months = Math.round(step / (30 * DAY));
    for (let i = 0; i < 40; i++) {
      const t = fromWall(w.y, w.mo + i * months, 1, 0, 0, 0);
      if (t > to) break;
      if (t >= from) out.push(t);
    }
    return { step, ticks: out };
  }
  if (step >= DAY) {
    const days = Math.round(step / DAY);
    for (let i = 0; i < 400; i++) {
      const t = fromWall(w.y, w.mo, w.d + i * days, 0, 0, 0);
      if (t > to) break;
      if (t >= from) out.push(t);
    }
    return { step, ticks: out };
  }
  // Align to the site's clock: its offset from UTC at `from`.
  const off = -offsetMinutes(from) * MINUTE;
  for (let t = Math.floor((from - off) / step) * step + off; t <= to; t += step) if (t >= from) out.push(t);
  return { step, ticks: out };
}

// timeLabel is ISO-ordered: "2026-12" for months, "12-02" for days,
// "14:00" for times, the date at midnight.
function timeLabel(t, step) {
  const w = wallParts(t);
  const p = (n) => String(n).padStart(2, "0");
  if (step >= 30 * DAY) return w.y + "-" + p(w.mo);
  if (step >= DAY || (w.h === 0 && w.mi === 0)) return p(w.mo) + "-" + p(w.d);
  return p(w.h) + ":" + p(w.mi);
}

function marker(shape, x, y, color) {
  const s = 5;
  switch (shape) {
    case "square":
      return svgEl("rect", { x: x - s, y: y - s, width: 2 * s, height: 2 * s, fill: "#fff", stroke: color, "stroke-width": 2 });
    case "triangle":
      return svgEl("path", { d: `M${x} ${y - s - 1}L${x + s + 1} ${y + s}H${x - s - 1}Z`, fill: color });
    case "diamond":
      return svgEl("path", { d: `M${x} ${y - s - 1}L${x + s + 1} ${y}L${x} ${y + s + 1}L${x - s - 1} ${y}Z`, fill: "#fff", stroke: color, "stroke-width": 2 });
    case "cross":
      return svgEl("path", { d: `M${x - s} ${y - s}L${x + s} ${y + s}M${x + s} ${y - s}L${x - s} ${y + s}`, stroke: color, "stroke-width": 2.5 });
  }
  return svgEl("circle", { cx: x, cy: y, r: s, fill: color });
}

function swatch(style) {
  const svg = svgEl("svg", { viewBox: "0 0 44 14", class: "swatch", "aria-hidden": "true" });
  svg.append(svgEl("line", { x1: 1, x2: 43, y1: 7, y2: 7, stroke: style.color, "stroke-width": 3, "stroke-dasharray": style.dash }));
  svg.append(marker(style.marker, 22, 7, style.color));
  return svg;
}

function thresholdSwatch(kind) {
  const th = THRESHOLDS[kind];
  const svg = svgEl("svg", { viewBox: "0 0 44 14", class: "swatch", "aria-hidden": "true" });
  svg.append(svgEl("line", { x1: 1, x2: 43, y1: 7, y2: 7, class: th.cls, "stroke-dasharray": th.dash }));
  return svg;
}

// nearest returns the index in the sorted array ts closest to t.
function nearest(ts, t) {
  let lo = 0;
  let hi = ts.length - 1;
  while (hi - lo > 1) {
    const mid = (lo + hi) >> 1;
    if (ts[mid] < t) lo = mid;
    else hi = mid;
  }
  return Math.abs(ts[lo] - t) <= Math.abs(ts[hi] - t) ? lo : hi;
}

// timeChart draws a chart and returns its element (a figure with the SVG,
// a legend and a readout line).
//
//   title: text above the chart; unit: of the value axis; log: log axis
//   from, to: time range in ms
//   series: [{name, t: Float64Array (ms), v: Float64Array, lo?, hi? (band)}]
//   thresholds: [{value, label, kind: limit|action|alert|min|zero}]
//   gap: a time step longer than this breaks the line (ms)
export function timeChart({ title, unit, log, from, to, series, thresholds = [], gap }) {
  let lo = Infinity;
  let hi = -Infinity;
  const consider = (v) => {
    if (!Number.isFinite(v)) return;
    if (log && v <= 0) return;
    if (v < lo) lo = v;
    if (v > hi) hi = v;
  };
  for (const s of series) {
    for (let i = 0; i < s.v.length; i++) consider(s.v[i]);
    if (s.lo) for (let i = 0; i < s.lo.length; i++) consider(s.lo[i]);
    if (s.hi) for (let i = 0; i < s.hi.length; i++) consider(s.hi[i]);
  }
  for (const th of thresholds) consider(th.value);
  if (!Number.isFinite(lo)) {
    lo = log ? 1 : 0;
    hi = log ? 10 : 1;
  }
  const axis = log ? logAxis(lo, hi) : linearAxis(lo, hi);
  const X = (t) => M.left + ((W - M.left - M.right) * (t - from)) / (to - from);
  const Y = axis.y;

  const svg = svgEl("svg", { viewBox: `0 0 ${W} ${H}`, class: "chart", role: "img", "aria-label": title + (log ? " (log scale)" : "") });
  svg.append(svgEl("rect", { x: M.left, y: M.top, width: W - M.left - M.right, height: H - M.top - M.bottom, class: "plot" }));
  const t = svgEl("text", { x: M.left, y: 19, class: "ct" });
  t.textContent = title + " — " + unit + (log ? ", log scale" : "");
  svg.append(t);

  for (const tk of axis.ticks) {
    const y = Y(tk.v);
    if (y < M.top - 1 || y > H - M.bottom + 1) continue;
    svg.append(svgEl("line", { x1: M.left, x2: W - M.right, y1: y, y2: y, class: "grid" }));
    const lab = svgEl("text", { x: M.left - 8, y: y + 5, class: "ax", "text-anchor": "end" });
    lab.textContent = tk.label;
    svg.append(lab);
  }
  const tt = timeTicks(from, to);
  for (const tk of tt.ticks) {
    const x = X(tk);
    svg.append(svgEl("line", { x1: x, x2: x, y1: M.top, y2: H - M.bottom, class: "grid" }));
    const lab = svgEl("text", { x, y: H - M.bottom + 22, class: "ax", "text-anchor": "middle" });
    lab.textContent = timeLabel(tk, tt.step);
    svg.append(lab);
  }

  // Bands first, lines over them.
  series.forEach((s, k) => {
    if (!s.lo || !s.hi) return;
    const st = STYLES[k % STYLES.length];
    let d = "";
    let run = [];
    const flush = () => {
      if (run.length > 1) {
        d += "M" + run.map((i) => X(s.t[i]).toFixed(1) + " " + Y(s.hi[i]).toFixed(1)).join("L");
        d += "L" + run.reverse().map((i) => X(s.t[i]).toFixed(1) + " " + Y(s.lo[i]).toFixed(1)).join("L") + "Z";
      }
      run = [];
    };
    for (let i = 0; i < s.t.length; i++) {
      if (run.length && gap && s.t[i] - s.t[run[run.length - 1]] > gap) flush();
      run.push(i);
    }
    flush();
    if (d) svg.append(svgEl("path", { d, fill: st.color, "fill-opacity": 0.18, stroke: "none" }));
  });
  series.forEach((s, k) => {
    const st = STYLES[k % STYLES.length];
    const parts = [];
    let prev = -Infinity;
    let open = false;
    for (let i = 0; i < s.t.length; i++) {
      const v = s.v[i];
      if (!Number.isFinite(v)) {
        open = false;
        continue;
      }
      const cmd = open && !(gap && s.t[i] - prev > gap) ? "L" : "M";
      parts.push(cmd + X(s.t[i]).toFixed(1) + " " + Y(v).toFixed(1));
      prev = s.t[i];
      open = true;
    }
    if (parts.length === 1) {
      // A single point has no line: show it as its marker.
      svg.append(marker(st.marker, X(s.t[0]), Y(s.v[0]), st.color));
    }
    svg.append(svgEl("path", { d: parts.join(""), class: "series", fill: "none", stroke: st.color, "stroke-width": s.thin ? 1.2 : 2.2, "stroke-dasharray": st.dash, "stroke-linejoin": "round" }));
    const n = s.t.length;
    if (n > 1) {
      const every = Math.max(1, Math.floor(n / 10));
      for (let i = Math.floor(every / 2); i < n; i += every) {
        if (Number.isFinite(s.v[i])) svg.append(marker(st.marker, X(s.t[i]), Y(s.v[i]), st.color));
      }
    }
  });

  // Threshold labels sit right of the plot, pushed apart where the lines
  // are closer than a line of text.
  const ths = thresholds.filter((th) => Number.isFinite(th.value)).map((th) => ({ ...th, y: Y(th.value) })).sort((a, b) => a.y - b.y);
  let last = -Infinity;
  for (const th of ths) {
    const def = THRESHOLDS[th.kind] || THRESHOLDS.limit;
    svg.append(svgEl("line", { x1: M.left, x2: W - M.right, y1: th.y, y2: th.y, class: def.cls, "stroke-dasharray": def.dash }));
    const ly = Math.max(th.y + 5, last + 17);
    last = ly;
    const lab = svgEl("text", { x: W - M.right + 6, y: ly, class: "thl " + def.cls + "-t" });
    lab.textContent = th.label;
    svg.append(lab);
  }

  const cursor = svgEl("line", { x1: 0, x2: 0, y1: M.top, y2: H - M.bottom, class: "cursor", visibility: "hidden" });
  svg.append(cursor);

  const legend = el(
    "ul",
    { class: "legend-list" },
    series.map((s, k) => el("li", {}, swatch(STYLES[k % STYLES.length]), " ", s.name)),
    thresholds.filter((th) => Number.isFinite(th.value)).map((th) => el("li", {}, thresholdSwatch(th.kind), " ", th.label)),
  );
  const readout = el("p", { class: "readout", "aria-live": "off" }, "\u00a0");
  svg.addEventListener("pointermove", (ev) => {
    const r = svg.getBoundingClientRect();
    const x = ((ev.clientX - r.left) / r.width) * W;
    if (x < M.left || x > W - M.right) return;
    const at = from + ((x - M.left) / (W - M.left - M.right)) * (to - from);
    cursor.setAttribute("x1", x);
    cursor.setAttribute("x2", x);
    cursor.setAttribute("visibility", "visible");
    const bits = [timeText(at, true)];
    for (const s of series) {
      if (!s.t.length) continue;
      const i = nearest(s.t, at);
      if (gap && Math.abs(s.t[i] - at) > gap) continue;
      bits.push(s.name + ": " + (unit === "Pa" ? s.v[i].toFixed(1) : num(s.v[i])));
    }
    readout.textContent = bits.join(" · ");
  });
  svg.addEventListener("pointerleave", () => cursor.setAttribute("visibility", "hidden"));
  return el("figure", { class: "chart-box" }, svg, legend, readout);
}
