// Exposure of one production run: the alarms of its zone that overlapped
// it, its time by attention level, the peak concentration per size, and
// the report a QA reviewer signs (HTML or PDF).

import { init, get, banner, explain, el, levelBadge, num, timeEl, download } from "./common.js";

const runID = decodeURIComponent(location.pathname.split("/")[2] || "");
const LEVELS = ["none", "alert", "action", "out-of-class", "unknown"];

function duration(s) {
  if (s >= 3600) return (s / 3600).toFixed(1) + " h";
  if (s >= 60) return Math.round(s / 60) + " min";
  return Math.round(s) + " s";
}

function render(ex) {
  const r = ex.run;
  document.getElementById("run-id").textContent = r.id;
  document.getElementById("crumb-run").textContent = r.id;
  document.getElementById("crumb-zone").replaceChildren(el("a", { href: "/zones/" + encodeURIComponent(r.zone) }, ex.zone_name || r.zone));
  document.getElementById("run-head").replaceChildren(
    el("p", {}, "Zone ", el("a", { href: "/zones/" + encodeURIComponent(r.zone) }, r.zone), " (" + ex.target + "); product " + (r.product || "—") + ", lot " + (r.lot || "—") + "."),
    el("p", {}, "Run ", timeEl(r.start, true), " – ", r.end ? timeEl(r.end, true) : "open", "; recorded by " + r.recorded_by + ". Figures up to ", timeEl(ex.until, true), "."),
    el("p", { class: "big" }, ex.alarms.length + " alarm" + (ex.alarms.length === 1 ? "" : "s") + " overlapped the run, " + ex.excursions + " about particles."),
  );
  const box = document.getElementById("run-alarms");
  if (!ex.alarms.length) {
    box.replaceChildren(el("p", { class: "muted" }, "No alarm of the zone overlapped the run."));
  } else {
    box.replaceChildren(el("table", { class: "alarm-table" },
      el("thead", {}, el("tr", {}, ["Level", "Kind", "Where", "Since", "Cleared", "Peak", ""].map((h) => el("th", {}, h)))),
      el("tbody", {}, ex.alarms.map((a) => el("tr", { dataset: { alarmId: a.id } },
        el("td", {}, levelBadge(a.level)),
        el("td", {}, a.kind),
        el("td", {}, [a.location, a.size_um ? "≥" + a.size_um + " µm" : ""].filter(Boolean).join(" · ") || "—"),
        el("td", {}, timeEl(a.since, true)),
        el("td", {}, a.cleared ? timeEl(a.cleared, true) : "not cleared"),
        el("td", { class: "num" }, num(a.peak)),
        el("td", {}, el("a", { href: "/alarms/" + encodeURIComponent(a.id).replace(/%3A/gi, ":") + "/investigation" }, "Investigate")),
      )))));
  }
  const total = Object.values(ex.time_by_level_s).reduce((s, v) => s + v, 0);
  const keys = [...LEVELS, ...Object.keys(ex.time_by_level_s).filter((k) => !LEVELS.includes(k))].filter((k) => ex.time_by_level_s[k] > 0);
  document.getElementById("run-levels").replaceChildren(el("table", {},
    el("thead", {}, el("tr", {}, ["Level", "Time", "Share"].map((h) => el("th", {}, h)))),
    el("tbody", {}, keys.map((k) => el("tr", {}, el("td", {}, k), el("td", { class: "num" }, duration(ex.time_by_level_s[k])),
      el("td", { class: "num" }, total ? (100 * ex.time_by_level_s[k] / total).toFixed(1) + " %" : "—"))))));
  const peaks = document.getElementById("run-peaks");
  peaks.replaceChildren(ex.peaks.length
    ? el("table", {}, el("thead", {}, el("tr", {}, ["Size", "Peak (particles/m³)", "Location", "Time"].map((h) => el("th", {}, h)))),
      el("tbody", {}, ex.peaks.map((p) => el("tr", {}, el("td", {}, "≥" + p.size_um + " µm"), el("td", { class: "num" }, num(p.per_m3)), el("td", {}, p.location), el("td", {}, timeEl(p.time, true))))))
    : el("p", { class: "muted" }, "No trusted reading during the run: nothing is known of its air."));
  document.getElementById("run-notes").replaceChildren(...ex.notes.map((n) => el("li", {}, n)));
  document.getElementById("run-caution").textContent = ex.caution;
}

async function load() {
  try {
    render(await get("/api/v1/runs/" + encodeURIComponent(runID) + "/exposure"));
    banner(null);
  } catch (e) {
    banner(explain(e, "Loading the run's exposure"));
  }
  document.body.dataset.ready = "yes";
}

init().then(() => {
  for (const f of ["html", "pdf"]) {
    document.getElementById("run-report-" + f).addEventListener("click", async () => {
      const msg = document.getElementById("run-msg");
      try {
        await download("/runs/" + encodeURIComponent(runID) + "/report?format=" + f, "exposure-" + runID + "." + f);
        msg.textContent = "Report downloaded.";
      } catch (e) {
        msg.textContent = explain(e, "The report");
      }
    });
  }
  load();
});
