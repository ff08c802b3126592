// One zone: state and limits, concentration per location and size over
// time against the alert, action and class limits (log scale; an hour to
// a year, from the rollups beyond six hours), DP over time, recent alarms
// and the operating state.

import {
  init, get, request, poll, banner, explain, el, stateBadge, levelBadge, alarmStateBadge, num, pct,
  targetText, OP_STATES, sizeKeys, timeEl, ago,
} from "./common.js";
import { timeChart } from "./chart.js";
import { mountEnvironment } from "./environment.js";

const HOUR = 3600e3;
const DAY = 24 * HOUR;

// Ranges: raw readings up to 6 h, rollups beyond (a year is 8 760 hourly
// rows per location).
const RANGES = {
  "1h": { span: HOUR, step: "" },
  "6h": { span: 6 * HOUR, step: "" },
  "24h": { span: DAY, step: "5m" },
  "7d": { span: 7 * DAY, step: "30m" },
  "30d": { span: 30 * DAY, step: "1h" },
  "1y": { span: 365 * DAY, step: "1h" },
};
const STEP_MS = { "5m": 5 * 60e3, "30m": 30 * 60e3, "1h": HOUR };

const zoneID = decodeURIComponent(location.pathname.replace(/^\/zones\//, "").replace(/\/$/, ""));
const api = "/api/v1/zones/" + encodeURIComponent(zoneID);
const params = new URLSearchParams(location.search);
let range = RANGES[params.get("range")] ? params.get("range") : "24h";
let zone = null;
let site = null;
let chartGen = 0;

function setMsg(id, text, kind) {
  const m = document.getElementById(id);
  m.textContent = text;
  m.className = "msg" + (kind ? " " + kind : "");
}

function renderHead(z) {
  document.title = (z.name || z.id) + " · cleanmon";
  document.getElementById("crumb-zone").textContent = z.name || z.id;
  const change = z.operating_state_change;
  document.getElementById("zone-head").replaceChildren(
    el("h1", {}, z.name || z.id),
    stateBadge(z.state, "big"),
    el("span", { class: "facts" }, targetText(z), " · ", OP_STATES[z.operating_state] || z.operating_state,
      z.operating_state === "maintenance" ? " (judged against " + z.limits_state + " limits)" : "",
      " · window " + z.window),
    el("span", { class: "muted" }, "evaluated ", timeEl(z.evaluated_at),
      change ? [" · state set by " + change.by + (change.reason ? " (" + change.reason + ")" : "") + " ", timeEl(change.since, true)] : ""),
  );
  document.getElementById("zone-head").dataset.state = z.state;

  const sizes = sizeKeys(z.limits_per_m3);
  const limits = el("table", {},
    el("thead", {}, el("tr", {}, el("th", {}, "Size"), el("th", { class: "n" }, "Class limit /m³"), el("th", { class: "n" }, "Action level /m³"), el("th", { class: "n" }, "Alert level /m³"))),
    el("tbody", {}, sizes.map((s) => el("tr", {},
      el("td", {}, "≥" + s + " µm"),
      el("td", { class: "n" }, z.limits_per_m3[s] === null ? "no limit" : num(z.limits_per_m3[s])),
      el("td", { class: "n" }, z.action_levels_per_m3[s] == null ? "—" : num(z.action_levels_per_m3[s])),
      el("td", { class: "n" }, z.alert_levels_per_m3[s] == null ? "—" : num(z.alert_levels_per_m3[s])),
    ))));
  const locs = el("table", {},
    el("thead", {}, el("tr", {},
      el("th", {}, "Location"), el("th", {}, "State"), el("th", {}, "Latest reading"),
      sizes.map((s) => [el("th", { class: "n" }, "≥" + s + " µm latest"), el("th", { class: "n" }, "≥" + s + " µm " + z.window + " mean")]))),
    el("tbody", {}, z.locations.map((l) => el("tr", { dataset: { location: l.id } },
      el("td", {}, l.name ? l.name + " (" + l.id + ")" : l.id, el("br"), el("span", { class: "muted" }, "counter " + l.counter)),
      el("td", {}, stateBadge(l.state)),
      el("td", {}, l.time ? [timeEl(l.time), " (" + ago(l.time) + ")"] : "none yet", l.status && l.status !== "ok" ? [el("br"), "status " + l.status] : ""),
      sizes.map((s) => {
        const lim = z.limits_per_m3[s];
        const mean = l.mean_per_m3 ? l.mean_per_m3[s] : undefined;
        const latest = l.concentration_per_m3 ? l.concentration_per_m3[s] : undefined;
        return [
          el("td", { class: "n" }, latest === undefined ? "—" : num(latest)),
          el("td", { class: "n" + (lim && mean > lim ? " over" : "") }, mean === undefined ? "—" : num(mean), lim && mean !== undefined ? el("br") : "", lim && mean !== undefined ? el("span", { class: "muted" }, pct(mean / lim) + " of limit") : ""),
        ];
      }),
    ))));
  document.getElementById("zone-table").replaceChildren(limits, el("br"), locs);
  document.getElementById("zone-notes").replaceChildren(...(z.notes || []).map((n) => el("li", {}, n)));
}

function renderAlarms(alarms) {
  const mine = alarms.filter((a) => a.zone === zoneID).slice(0, 15);
  const box = document.getElementById("zone-alarms");
  if (!mine.length) {
    box.replaceChildren(el("p", { class: "muted" }, "No alarm in the last 7 days."));
    return;
  }
  box.replaceChildren(el("table", { class: "alarm-table" },
    el("thead", {}, el("tr", {}, ["State", "Level", "Kind", "Where", "Since", "Message", "Acknowledged"].map((h) => el("th", {}, h)))),
    el("tbody", {}, mine.map((a) => el("tr", { dataset: { alarmId: a.id } },
      el("td", {}, alarmStateBadge(a.state)),
      el("td", {}, levelBadge(a.level)),
      el("td", {}, a.kind),
      el("td", {}, [a.location, a.size_um ? "≥" + a.size_um + " µm" : "", a.sensor].filter(Boolean).join(" · ") || "—"),
      el("td", {}, timeEl(a.since, true)),
      el("td", {}, a.message),
      el("td", {}, a.acknowledged_by ? a.acknowledged_by + (a.comment ? ": " + a.comment : "") : "—"),
    )))));
}

async function refreshHead() {
  const [z, alarms] = await Promise.all([get(api), get("/api/v1/alarms?state=all")]);
  const first = zone === null;
  zone = z;
  renderHead(z);
  renderAlarms(alarms);
  if (first) {
    document.getElementById("opstate-state").value = z.operating_state;
    drawCharts();
  }
  banner(null);
}

// seriesOf turns the readings rows into one series per location and size.
function seriesOf(rows, rolled, sizes) {
  const by = new Map();
  for (const r of rows) {
    let s = by.get(r.location);
    if (!s) {
      s = { t: [], v: {}, max: {} };
      for (const k of sizes) {
        s.v[k] = [];
        s.max[k] = [];
      }
      by.set(r.location, s);
    }
    s.t.push(Date.parse(r.time));
    const vals = rolled ? r.mean_per_m3 : r.concentration_per_m3;
    for (const k of sizes) {
      const v = vals ? vals[k] : undefined;
      s.v[k].push(v === undefined ? NaN : v);
      s.max[k].push(rolled && r.max_per_m3 && r.max_per_m3[k] !== undefined ? r.max_per_m3[k] : NaN);
    }
  }
  return by;
}

function medianGap(ts) {
  if (ts.length < 3) return 0;
  const d = [];
  for (let i = 1; i < ts.length; i++) d.push(ts[i] - ts[i - 1]);
  d.sort((a, b) => a - b);
  return d[d.length >> 1];
}

async function drawCharts() {
  if (!zone) return;
  const gen = ++chartGen;
  for (const b of document.querySelectorAll("[data-range]")) b.setAttribute("aria-pressed", String(b.dataset.range === range));
  const r = RANGES[range];
  const to = Date.now();
  const from = to - r.span;
  const q = new URLSearchParams({ from: new Date(from).toISOString(), to: new Date(to).toISOString() });
  if (r.step) q.set("step", r.step);
  const info = document.getElementById("chart-info");
  info.textContent = "Loading " + range + "…";
  document.body.dataset.chartsReady = "no";
  const t0 = performance.now();
  let rows;
  try {
    rows = await get(api + "/readings?" + q.toString());
  } catch (e) {
    info.textContent = explain(e, "Loading the readings");
    return;
  }
  if (gen !== chartGen) return;
  const t1 = performance.now();
  const sizes = sizeKeys(zone.limits_per_m3);
  const rolled = !!r.step;
  const by = seriesOf(rows, rolled, sizes);
  const showMax = rolled && document.getElementById("show-max").checked;
  const charts = [];
  const names = new Map(zone.locations.map((l) => [l.id, l.name ? l.id + " " + l.name : l.id]));
  for (const k of sizes) {
    const series = [];
    for (const [loc, s] of by) {
      const t = Float64Array.from(s.t);
      const gap = rolled ? STEP_MS[r.step] * 1.5 : Math.max(3 * medianGap(s.t), 120e3);
      series.push({ name: names.get(loc) || loc, t, v: Float64Array.from(s.v[k]), gap });
      if (showMax) series.push({ name: (names.get(loc) || loc) + " max", t, v: Float64Array.from(s.max[k]), thin: true });
    }
    const gap = series.length ? series[0].gap : 0;
    const th = [];
    if (zone.limits_per_m3[k] != null) th.push({ value: zone.limits_per_m3[k], label: "limit " + num(zone.limits_per_m3[k]), kind: "limit" });
    // A level equal to the limit (the default when none is set) is the limit line.
    const own = (v) => v != null && v !== zone.limits_per_m3[k];
    if (own(zone.action_levels_per_m3[k])) th.push({ value: zone.action_levels_per_m3[k], label: "action " + num(zone.action_levels_per_m3[k]), kind: "action" });
    if (own(zone.alert_levels_per_m3[k])) th.push({ value: zone.alert_levels_per_m3[k], label: "alert " + num(zone.alert_levels_per_m3[k]), kind: "alert" });
    charts.push(timeChart({
      title: "≥" + k + " µm" + (rolled ? ", mean per " + r.step : ""),
      unit: "particles/m³", log: true, from, to, series, thresholds: th, gap,
    }));
  }
  const box = document.getElementById("charts");
  box.replaceChildren(...(charts.length ? charts : [el("p", { class: "muted" }, "This zone has no sizes to chart.")]));
  box.getBoundingClientRect(); // lay out now, so that the time below includes it
  requestAnimationFrame(() => requestAnimationFrame(() => {
    if (gen !== chartGen) return;
    const t2 = performance.now();
    const points = rows.length;
    info.textContent = points + (rolled ? " rolled-up rows (step " + r.step + ")" : " readings") +
      " · fetched in " + Math.round(t1 - t0) + " ms, drawn in " + Math.round(t2 - t1) + " ms";
    Object.assign(document.body.dataset, {
      chartsReady: "yes", chartRange: range, chartRows: String(points),
      chartFetchMs: String(Math.round(t1 - t0)), chartDrawMs: String(Math.round(t2 - t1)),
    });
  }));
  drawDP(from, to, gen);
}

// DP is kept raw (a sample every few seconds, no rollups), so its chart
// covers at most the last 30 days: a year would mean reading millions of
// samples per sensor for one view.
const DP_SPAN = 30 * DAY;

async function drawDP(from, to, gen) {
  if (!site) site = await get("/api/v1/sensors");
  const capped = to - from > DP_SPAN;
  if (capped) from = to - DP_SPAN;
  const sensors = site.filter((s) => s.high === zoneID || s.low === zoneID);
  const box = document.getElementById("dp-charts");
  if (!sensors.length) {
    box.replaceChildren(el("p", { class: "muted" }, "No DP sensor on this zone."));
    return;
  }
  const q = new URLSearchParams({ from: new Date(from).toISOString(), to: new Date(to).toISOString(), points: "600" });
  const out = [];
  for (const s of sensors) {
    try {
      const h = await get("/ui/pressure/" + encodeURIComponent(s.id) + "?" + q.toString());
      const t = Float64Array.from(h.points.map((p) => Date.parse(p.time)));
      const th = [{ value: h.min_pa, label: "min " + h.min_pa + " Pa", kind: "min" }, { value: 0, label: "0 Pa", kind: "zero" }];
      if (h.max_pa) th.push({ value: h.max_pa, label: "max " + h.max_pa + " Pa", kind: "alert" });
      const bucket = (to - from) / 600;
      out.push(timeChart({
        title: s.id + ": " + s.high + " → " + s.low + (s.high === zoneID ? "" : " (this zone on the low side)"),
        unit: "Pa", log: false, from, to,
        series: [{ name: "mean per " + h.bucket + ", band min–max", t, v: Float64Array.from(h.points.map((p) => p.mean)), lo: Float64Array.from(h.points.map((p) => p.min)), hi: Float64Array.from(h.points.map((p) => p.max)) }],
        thresholds: th, gap: Math.max(3 * bucket, 60e3),
      }));
    } catch (e) {
      out.push(el("p", { class: "msg error" }, explain(e, "Loading " + s.id)));
    }
  }
  if (capped) out.push(el("p", { class: "muted" }, "DP shows the last 30 days: it is stored as raw samples, not rolled up."));
  if (gen === chartGen) box.replaceChildren(...out);
}

function wireControls() {
  for (const b of document.querySelectorAll("[data-range]")) {
    b.addEventListener("click", () => {
      range = b.dataset.range;
      const u = new URL(location.href);
      u.searchParams.set("range", range);
      history.replaceState(null, "", u);
      drawCharts();
    });
  }
  document.getElementById("show-max").addEventListener("change", drawCharts);
  document.getElementById("opstate-form").addEventListener("submit", async (ev) => {
    ev.preventDefault();
    const body = {
      state: document.getElementById("opstate-state").value,
      by: document.getElementById("opstate-by").value.trim(),
      reason: document.getElementById("opstate-reason").value.trim(),
    };
    setMsg("opstate-msg", "Sending…");
    try {
      const z = await request("PUT", api + "/state", body);
      zone = z;
      renderHead(z);
      setMsg("opstate-msg", "Operating state is now " + (OP_STATES[z.operating_state] || z.operating_state) + ".", "ok");
      document.getElementById("opstate-reason").value = "";
    } catch (e) {
      setMsg("opstate-msg", explain(e, "Changing the operating state"), "error");
    }
  });
}

init().then(() => {
  wireControls();
  poll(refreshHead, 5000);
  mountEnvironment("env-table", zoneID);
  setInterval(() => {
    if (range === "1h" || range === "6h") drawCharts();
  }, 30000);
});
