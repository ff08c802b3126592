// The overview: every zone on the site's pressure cascade, highest
// pressure at the top, with the DP sensors between the rows they join.
// Refreshed every 2 s from the API without reloading.

import {
  init, get, poll, banner, el, svgEl, stateBadge, dpBadge, levelBadge, pa, pct,
  targetText, OP_STATES, sizeKeys, ago, timeText,
} from "./common.js";
import { mountEnvironment } from "./environment.js";

const EVERY = 2000;

// worstShare finds the size and location whose concentration is the
// largest share of its limit: the window mean where there is one (that
// is what the state is judged on), else the latest reading.
function worstShare(z) {
  let best = null;
  for (const size of sizeKeys(z.limits_per_m3)) {
    const lim = z.limits_per_m3[size];
    if (!lim) continue;
    for (const l of z.locations || []) {
      const mean = l.mean_per_m3 && l.mean_per_m3[size];
      const latest = l.concentration_per_m3 && l.concentration_per_m3[size];
      const v = mean !== undefined && mean !== null ? mean : latest;
      if (v === undefined || v === null) continue;
      const share = v / lim;
      if (!best || share > best.share) best = { share, size, location: l.id, value: v, limit: lim, mean: mean !== undefined && mean !== null };
    }
  }
  return best;
}

// shareBar draws the share on a 0–150 % scale with a mark at 100 %.
function shareBar(share) {
  const svg = svgEl("svg", { viewBox: "0 0 150 12", class: "share-bar", "aria-hidden": "true", preserveAspectRatio: "none" });
  svg.append(svgEl("rect", { x: 0, y: 1, width: 150, height: 10, class: "sb-track" }));
  const w = Math.max(0, Math.min(share, 1.5)) * 100;
  svg.append(svgEl("rect", { x: 0, y: 1, width: w, height: 10, class: share > 1 ? "sb-over" : "sb-fill" }));
  svg.append(svgEl("line", { x1: 100, x2: 100, y1: 0, y2: 12, class: "sb-limit" }));
  return svg;
}

function zoneCard(z, now) {
  const classified = (z.class !== null && z.class !== undefined) || !!z.grade;
  const monitored = classified || (z.locations || []).length > 0;
  const alarms = (z.active_alarms || []).filter((a) => a.state !== "pending");
  const latest = (z.locations || []).map((l) => l.time).filter(Boolean).sort().pop();
  const ws = worstShare(z);
  const card = el(
    "a",
    { class: "zone-card st-" + (monitored ? z.state : "none"), href: "/zones/" + encodeURIComponent(z.id), dataset: { zone: z.id, state: z.state } },
    el("div", { class: "zc-head" },
      el("span", { class: "zc-name" }, z.name || z.id),
      el("span", { class: "zc-target" }, targetText(z), monitored ? " · " + (OP_STATES[z.operating_state] || z.operating_state) : " reference area")),
    monitored ? stateBadge(z.state, "big") : el("span", { class: "badge st-none big" }, el("span", { class: "word" }, "NOT MONITORED")),
  );
  if (classified) {
    card.append(
      ws
        ? el("div", { class: "zc-share" },
          el("span", { class: "zc-share-text" }, "≥" + ws.size + " µm at ", el("strong", {}, pct(ws.share)), " of limit", ws.mean ? " (" + z.window + " mean)" : " (latest)"),
          shareBar(ws.share))
        : el("div", { class: "zc-share" }, "No concentration yet"),
    );
  }
  const meta = [];
  if ((z.locations || []).length) meta.push(z.locations.length + (z.locations.length === 1 ? " location" : " locations"));
  if (alarms.length) meta.push(alarms.length + (alarms.length === 1 ? " alarm open" : " alarms open"));
  if (latest) meta.push("reading " + ago(latest, now));
  if (meta.length) card.append(el("div", { class: "zc-meta" }, meta.join(" · ")));
  if (alarms.length) {
    // The most severe open alarm (the newest of its level), named with its
    // own level: a badge and a name that disagree would mislead.
    const top = alarms.find((a) => a.level === "action") || alarms[0];
    card.append(el("div", { class: "zc-alarm" }, levelBadge(top.level), " ", top.kind + (top.location ? " at " + top.location : "")));
  }
  return card;
}

function areaCard(a) {
  return el("div", { class: "zone-card area", dataset: { zone: a.id, state: "none" } },
    el("div", { class: "zc-head" }, el("span", { class: "zc-name" }, a.name), el("span", { class: "zc-target" }, "Unclassified area")));
}

function sensorChip(s, alarms) {
  const chip = el("div", { class: "dp-chip", dataset: { sensor: s.id, state: s.state } },
    dpBadge(s.state),
    el("span", { class: "dp-value" }, s.pa === null ? "—" : pa(s.pa)),
    el("span", { class: "dp-min" }, "min " + pa(s.min_pa) + (s.max_pa ? ", max " + pa(s.max_pa) : "")),
    el("span", { class: "dp-path" }, s.id + ": " + s.high + " ", el("span", { class: "arrow", "aria-label": "to" }, "→"), " " + s.low),
  );
  const raised = alarms.filter((a) => a.sensor === s.id && a.state !== "pending");
  if (raised.length) chip.append(levelBadge(raised.some((a) => a.level === "action") ? "action" : "alert"), " " + raised[0].kind);
  return chip;
}

function render(zones, site, sensors, alarms) {
  const now = Date.now();
  const byID = new Map(zones.map((z) => [z.id, z]));
  const levels = [...new Set(site.areas.map((a) => a.level))].sort((a, b) => b - a);
  const rows = [];
  for (const lv of levels) {
    const areas = site.areas.filter((a) => a.level === lv);
    rows.push(el("div", { class: "cascade-row", dataset: { level: lv } },
      areas.map((a) => (byID.has(a.id) ? zoneCard(byID.get(a.id), now) : areaCard(a)))));
    const ids = new Set(areas.map((a) => a.id));
    const below = sensors.filter((s) => ids.has(s.high));
    if (below.length) rows.push(el("div", { class: "dp-row", "aria-label": "Differential pressure below " + areas.map((a) => a.id).join(", ") }, below.map((s) => sensorChip(s, alarms))));
  }
  // Zones on no cascade (the site has no sensors) still show.
  const placed = new Set(site.areas.map((a) => a.id));
  const rest = zones.filter((z) => !placed.has(z.id));
  if (rest.length) rows.push(el("div", { class: "cascade-row" }, rest.map((z) => zoneCard(z, now))));
  document.getElementById("cascade").replaceChildren(...rows);

  const open = alarms.filter((a) => a.state !== "pending");
  const action = open.filter((a) => a.level === "action").length;
  const summary = document.getElementById("alarm-summary");
  summary.replaceChildren(el("span", {},
    open.length === 0
      ? "No alarm open"
      : [String(open.length), open.length === 1 ? " alarm open: " : " alarms open: ", action ? [levelBadge("action"), " " + action + " "] : "", open.length - action ? [levelBadge("alert"), " " + (open.length - action)] : ""],
  ));
  summary.dataset.count = open.length;
  document.getElementById("site-name").textContent = site.site || "Site overview";
  const live = document.getElementById("live");
  live.textContent = "Live · updated " + timeText(new Date().toISOString());
  live.dataset.updated = String(now);
  document.body.dataset.ready = "yes";
}

init().then(() => {
  poll(async () => {
    const [zones, site, sensors, alarms] = await Promise.all([get("/api/v1/zones"), get("/ui/site"), get("/api/v1/sensors"), get("/api/v1/alarms?state=active")]);
    render(zones, site, sensors, alarms);
    banner(null);
  }, EVERY);
  mountEnvironment("env-table");
});
