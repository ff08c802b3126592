// Investigation of one alarm: the coincident events ranked by the daemon
// (score and evidence in words), the door openings, the runs in the room
// and the series around the alarm, drawn with the same charts as the zone
// page. The ranking suggests where to look first; the page says so.

import { init, get, banner, explain, el, levelBadge, alarmStateBadge, timeEl } from "./common.js";
import { timeChart } from "./chart.js";

const alarmID = decodeURIComponent(location.pathname.split("/")[2] || "");
const params = new URLSearchParams(location.search);

function pathSegment(id) {
  return encodeURIComponent(id).replace(/%3A/gi, ":");
}

function lead(s) {
  const a = Math.abs(s);
  const t = a >= 120 ? Math.round(a / 60) + " min" : Math.round(a) + " s";
  return s >= 0 ? t + " before the rise" : t + " after the rise";
}

function renderHead(inv) {
  const a = inv.alarm;
  document.getElementById("crumb-alarm").textContent = a.kind + " in " + a.zone;
  document.getElementById("inv-head").replaceChildren(
    el("p", {}, levelBadge(a.level), " ", alarmStateBadge(a.state), " ", a.kind + " in ",
      el("a", { href: "/zones/" + encodeURIComponent(a.zone) }, a.zone),
      a.location ? " at " + a.location : "", a.size_um ? " (≥" + a.size_um + " µm)" : "", ", since ", timeEl(a.since, true)),
    el("p", {}, a.message || ""),
    el("p", { class: "muted" }, "Window ", timeEl(inv.from, true), " – ", timeEl(inv.to, true), ". ",
      inv.rise_found ? ["Rise of the zone found at ", timeEl(inv.rise, true), inv.rise_location ? " (" + inv.rise_location + ")" : "", "."] : "No rise of the zone found: events are timed against the alarm."),
  );
}

function renderEvents(inv) {
  const box = document.getElementById("inv-events");
  if (!inv.events.length) {
    box.replaceChildren(el("p", { class: "muted" }, "No coincident event found. This does not mean there was none: see what could not be judged below."));
  } else {
    box.replaceChildren(el("table", { class: "event-table" },
      el("thead", {}, el("tr", {}, ["#", "Event", "Evidence", "When", "Score", "z", "Lead weight", "Plausibility"].map((h) => el("th", {}, h)))),
      el("tbody", {}, inv.events.map((e) => el("tr", { class: e.rank === 1 ? "rank-first" : "", dataset: { kind: e.kind, rank: String(e.rank) } },
        el("td", { class: "num" }, String(e.rank)),
        el("td", {}, e.kind, el("div", { class: "muted" }, (e.subjects || []).join(", "))),
        el("td", { class: "evidence" }, e.evidence),
        el("td", {}, timeEl(e.start, false), el("div", { class: "muted" }, lead(e.lead_s))),
        el("td", { class: "num" }, e.score.toFixed(2)),
        el("td", { class: "num" }, e.deviation.toFixed(1)),
        el("td", { class: "num" }, e.weight.toFixed(2)),
        el("td", { class: "num" }, e.plausible.toFixed(2)),
      )))));
  }
  document.getElementById("inv-method").textContent = "Ranking: " + inv.method + ".";
  document.getElementById("inv-unknown").replaceChildren(...inv.unknown.map((u) => el("li", {}, "Not judged: " + u)));
  document.getElementById("inv-caution").textContent = inv.caution;
}

function renderDoors(inv) {
  const box = document.getElementById("inv-doors");
  if (!inv.doors.length) {
    box.replaceChildren(el("p", { class: "muted" }, "No DP sensor on this zone's boundary."));
    return;
  }
  box.replaceChildren(el("table", {},
    el("thead", {}, el("tr", {}, ["Sensor", "Minimum", "Openings", "When (lowest DP, how long)"].map((h) => el("th", {}, h)))),
    el("tbody", {}, inv.doors.map((d) => el("tr", { dataset: { sensor: d.sensor } },
      el("td", {}, d.sensor),
      el("td", { class: "num" }, d.min_pa + " Pa"),
      el("td", { class: "num" }, String(d.count)),
      el("td", {}, d.openings.map((o) => el("div", {}, timeEl(o.start, false), " · " + o.low_pa.toFixed(1) + " Pa · " + Math.round(o.duration_s) + " s" + (o.end ? "" : " (still open)")))),
    )))));
}

function renderRuns(inv) {
  const box = document.getElementById("inv-runs");
  if (!inv.runs.length) {
    box.replaceChildren(el("p", { class: "muted" }, "No production run of the zone overlapped this alarm."));
    return;
  }
  box.replaceChildren(el("table", {},
    el("thead", {}, el("tr", {}, ["Run", "Product", "Lot", "Start", "End"].map((h) => el("th", {}, h)))),
    el("tbody", {}, inv.runs.map((r) => el("tr", {},
      el("td", {}, el("a", { href: "/runs/" + encodeURIComponent(r.id) }, r.id)),
      el("td", {}, r.product || "—"), el("td", {}, r.lot || "—"),
      el("td", {}, timeEl(r.start, true)), el("td", {}, r.end ? timeEl(r.end, true) : "open"),
    )))));
}

function renderCharts(inv) {
  const from = Date.parse(inv.from);
  const to = Date.parse(inv.to);
  const groups = new Map();
  for (const s of inv.series) {
    const key = s.group === "location" || s.group === "neighbour" ? s.group + " " + s.size_um : s.group;
    if (!groups.has(key)) groups.set(key, []);
    groups.get(key).push(s);
  }
  const titles = { location: "Zone, ≥SIZE µm", neighbour: "Neighbours, ≥SIZE µm", pressure: "Differential pressure", flow: "Counter flow" };
  const out = [];
  for (const [key, list] of groups) {
    const [group, size] = key.split(" ");
    const log = group === "location" || group === "neighbour";
    const thresholds = [];
    if (group === "pressure") for (const s of list) thresholds.push({ value: s.min_pa, label: "min " + s.min_pa + " Pa", kind: "min" });
    out.push(timeChart({
      title: (titles[group] || group).replace("SIZE", size), unit: list[0].unit, log, from, to,
      series: list.map((s) => ({ name: s.name, t: Float64Array.from(s.points.map((p) => p[0])), v: Float64Array.from(s.points.map((p) => p[1])) })),
      thresholds, gap: group === "pressure" ? 60e3 : 3 * 60e3,
    }));
  }
  document.getElementById("inv-charts").replaceChildren(...out);
}

async function load() {
  const q = new URLSearchParams({ before: document.getElementById("inv-before").value, after: document.getElementById("inv-after").value });
  try {
    const inv = await get("/api/v1/alarms/" + pathSegment(alarmID) + "/investigation?" + q.toString());
    renderHead(inv);
    renderEvents(inv);
    renderDoors(inv);
    renderRuns(inv);
    renderCharts(inv);
    banner(null);
  } catch (e) {
    banner(explain(e, "Investigating the alarm"));
  }
  document.body.dataset.ready = "yes";
}

init().then(() => {
  for (const id of ["inv-before", "inv-after"]) {
    const sel = document.getElementById(id);
    const v = params.get(id.slice(4));
    if (v) sel.value = v;
    sel.addEventListener("change", load);
  }
  load();
});
