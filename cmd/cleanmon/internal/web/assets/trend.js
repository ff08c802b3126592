// A zone's month on one page beside the month before: per location and
// size the mean and percentiles against the levels, a chart per size,
// alarms by kind and level, door openings per day, time by attention
// level and the level advice, with the report as HTML or PDF.

import { init, get, banner, explain, el, num, download } from "./common.js";
import { timeChart } from "./chart.js";

const zoneID = decodeURIComponent(location.pathname.split("/")[2] || "");
const LEVELS = ["none", "alert", "action", "out-of-class", "unknown"];

function defaultMonth() {
  const q = new URLSearchParams(location.search).get("month");
  if (q) return q;
  const d = new Date();
  d.setUTCDate(1);
  d.setUTCMonth(d.getUTCMonth() - 1);
  return d.toISOString().slice(0, 7);
}

function hours(s) {
  return s >= 86400 ? (s / 86400).toFixed(1) + " d" : (s / 3600).toFixed(1) + " h";
}

function cell(v) {
  return el("td", { class: "num" }, v === null || v === undefined ? "—" : num(v));
}

function render(t) {
  document.getElementById("trend-title").textContent = (t.zone_name || t.zone) + ", " + t.month;
  const crumb = document.getElementById("crumb-zone");
  crumb.textContent = t.zone_name || t.zone;
  crumb.href = "/zones/" + encodeURIComponent(t.zone);
  const rows = [];
  for (const l of t.locations) {
    for (const [m, s] of [[t.month, l.this], [t.previous_month, l.previous]]) {
      rows.push(el("tr", { dataset: { location: l.location, size: String(l.size_um), month: m } },
        el("td", {}, l.location), el("td", {}, "≥" + l.size_um + " µm"), el("td", {}, m), el("td", { class: "num" }, String(s.n)),
        cell(s.mean_per_m3), cell(s.p95_per_m3), cell(s.p99_per_m3), cell(s.max_per_m3),
        el("td", { class: "num" }, s.over_alert + " / " + s.over_action + " / " + s.over_class),
        el("td", {}, [l.alert_per_m3, l.action_per_m3, l.class_per_m3].map((v) => (v == null ? "—" : num(v))).join(" / "))));
    }
  }
  document.getElementById("trend-locations").replaceChildren(el("table", {},
    el("thead", {}, el("tr", {}, ["Location", "Size", "Month", "n", "Mean", "p95", "p99", "Max", "> alert / action / class", "Alert / action / class"].map((h) => el("th", {}, h)))),
    el("tbody", {}, rows)));
  const from = Date.parse(t.from);
  const to = Date.parse(t.to);
  document.getElementById("trend-charts").replaceChildren(...t.charts.map((c) => {
    const th = [];
    if (c.class_per_m3) th.push({ value: c.class_per_m3, label: "class " + num(c.class_per_m3), kind: "limit" });
    if (c.action_per_m3) th.push({ value: c.action_per_m3, label: "action " + num(c.action_per_m3), kind: "action" });
    if (c.alert_per_m3) th.push({ value: c.alert_per_m3, label: "alert " + num(c.alert_per_m3), kind: "alert" });
    return timeChart({
      title: "≥" + c.size_um + " µm, hourly mean", unit: "particles/m³", log: true, from, to,
      series: c.series.map((s) => ({ name: s.location, t: Float64Array.from(s.points.map((p) => p[0])), v: Float64Array.from(s.points.map((p) => p[1])) })),
      thresholds: th, gap: 3 * 3600e3,
    });
  }));
  document.getElementById("trend-alarms").replaceChildren(el("p", {}, t.alarms_this + " alarms (" + t.previous_month + ": " + t.alarms_previous + ")"),
    t.alarms.length ? el("table", {}, el("thead", {}, el("tr", {}, ["Kind", "Level", t.month, t.previous_month].map((h) => el("th", {}, h)))),
      el("tbody", {}, t.alarms.map((a) => el("tr", {}, el("td", {}, a.kind), el("td", {}, a.level), el("td", { class: "num" }, String(a.this)), el("td", { class: "num" }, String(a.previous)))))) : "");
  document.getElementById("trend-doors").replaceChildren(el("p", {}, t.doors_this + " openings (" + t.previous_month + ": " + t.doors_previous + ")"),
    el("table", {}, el("thead", {}, el("tr", {}, t.doors_per_day.map((d) => el("th", {}, d.day.slice(8))))),
      el("tbody", {}, el("tr", {}, t.doors_per_day.map((d) => el("td", { class: "num" }, String(d.count)))))));
  const keys = (m) => [...LEVELS, ...Object.keys(m).filter((k) => !LEVELS.includes(k))].filter((k) => m[k] > 0);
  const lv = [...new Set([...keys(t.time_by_level_s), ...keys(t.previous_time_by_level_s)])];
  document.getElementById("trend-levels").replaceChildren(el("table", {},
    el("thead", {}, el("tr", {}, ["Level", t.month, t.previous_month].map((h) => el("th", {}, h)))),
    el("tbody", {}, lv.map((k) => el("tr", {}, el("td", {}, k), el("td", { class: "num" }, hours(t.time_by_level_s[k] || 0)), el("td", { class: "num" }, hours(t.previous_time_by_level_s[k] || 0)))))));
  document.getElementById("trend-advice").replaceChildren(el("table", {},
    el("thead", {}, el("tr", {}, ["Size", "Suggested alert", "Suggested action", "Limit", "Samples", "Mean"].map((h) => el("th", {}, h)))),
    el("tbody", {}, t.advice.map((a) => el("tr", {}, el("td", {}, "≥" + a.size_um + " µm"), cell(a.alert_per_m3), cell(a.action_per_m3), cell(a.limit_per_m3),
      el("td", { class: "num" }, String(a.samples)), cell(a.mean_per_m3))))));
  document.getElementById("trend-notes").replaceChildren(...t.notes.map((n) => el("li", {}, n)));
  document.getElementById("trend-caution").textContent = t.caution;
}

async function load() {
  const m = document.getElementById("trend-month").value;
  try {
    render(await get("/api/v1/zones/" + encodeURIComponent(zoneID) + "/trend?month=" + encodeURIComponent(m)));
    banner(null);
  } catch (e) {
    banner(explain(e, "Loading the month"));
  }
  document.body.dataset.ready = "yes";
}

init().then(() => {
  const month = document.getElementById("trend-month");
  month.value = defaultMonth();
  month.addEventListener("change", () => {
    const u = new URL(location.href);
    u.searchParams.set("month", month.value);
    history.replaceState(null, "", u);
    load();
  });
  for (const f of ["html", "pdf"]) {
    document.getElementById("trend-report-" + f).addEventListener("click", async () => {
      const msg = document.getElementById("trend-msg");
      try {
        await download("/zones/" + encodeURIComponent(zoneID) + "/trend/report?format=" + f + "&month=" + month.value, "trend-" + zoneID + "-" + month.value + "." + f);
        msg.textContent = "Report downloaded.";
      } catch (e) {
        msg.textContent = explain(e, "The report");
      }
    });
  }
  load();
});
