// The overview: every zone on the site's pressure cascade, highest
// pressure at the top, with the DP sensors between the rows they join.
// Refreshed every 2 s from the API without reloading.

import {
  init, get, poll, banner, el, svgEl, attentionBadge, stateBadge, dpBadge, dpStatus, levelBadge, pa, pct,
  targetText, OP_STATES, clearContradicted, sizeKeys, ago, timeText, timeEl, siteInfo,
} from "./common.js";
import { mountEnvironment } from "./environment.js";

const EVERY = 2000;

// current tells whether a location's latest values may be shown as
// current: fresh and trusted. A stale or untrusted location shows no
// number as if it were now.
function current(l) {
  return l.fresh !== false && l.trusted !== false && !!l.time;
}

// worstShare finds the size and location whose concentration is the
// largest share of its limit, among current locations only: the window
// mean where there is one (that is what the state is judged on), else the
// latest reading.
function worstShare(z) {
  let best = null;
  for (const size of sizeKeys(z.limits_per_m3)) {
    const lim = z.limits_per_m3[size];
    if (!lim) continue;
    for (const l of (z.locations || []).filter(current)) {
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

// openAlarms are the zone's open alarms from the zone object (the judge's
// list), or, from a daemon that does not send them, from the site's.
function openAlarms(z, siteAlarms) {
  const own = Array.isArray(z.active_alarms) ? z.active_alarms : siteAlarms.filter((a) => a.zone === z.id);
  return own.filter((a) => a.state !== "delayed" && a.state !== "pending" && a.state !== "cleared");
}

const MAX_REASONS = 2;

function zoneCard(z, now, siteAlarms) {
  const classified = (z.class !== null && z.class !== undefined) || !!z.grade;
  const monitored = classified || (z.locations || []).length > 0;
  const alarms = openAlarms(z, siteAlarms);
  const fresh = (z.locations || []).filter(current);
  const stale = (z.locations || []).length - fresh.length;
  const latest = (z.locations || []).map((l) => l.time).filter(Boolean).sort().pop();
  const att = Object.hasOwn(z, "attention") ? z.attention : undefined;
  const ws = worstShare(z);
  // An unmonitored area says so, unless something about it needs a person.
  const neutral = !monitored && (att === "none" || att === undefined);
  let shownAtt = neutral ? "none-monitored" : (att in { none: 1, alert: 1, action: 1, "out-of-class": 1 } ? att : "unknown");
  // Belt and braces: clear is shown only when nothing the page can see
  // contradicts it.
  const against = !neutral && shownAtt === "none" ? clearContradicted({ ...z, active_alarms: alarms }) : [];
  const contradicted = against.length > 0;
  if (contradicted) shownAtt = "unknown";
  const card = el(
    "a",
    { class: "zone-card at-" + shownAtt, href: "/zones/" + encodeURIComponent(z.id), dataset: { zone: z.id, state: z.state, attention: neutral ? "not-monitored" : shownAtt } },
    el("div", { class: "zc-head" },
      el("span", { class: "zc-name" }, z.name || z.id),
      el("span", { class: "zc-target" }, targetText(z), monitored ? " · " + (OP_STATES[z.operating_state] || z.operating_state) : " · reference area")),
    neutral ? el("span", { class: "badge st-none big" }, el("span", { class: "word" }, "NOT MONITORED")) : attentionBadge(shownAtt, "big headline"),
  );
  if (monitored) {
    const sub = el("div", { class: "zc-state" }, "Particles ", stateBadge(z.state, "small"));
    if (z.clean_up_until) sub.append(" · clean-up until ", timeEl(z.clean_up_until));
    card.append(sub);
  }
  const reasons = Array.isArray(z.attention_reasons) ? z.attention_reasons : [];
  if (contradicted) {
    card.append(el("ul", { class: "zc-reasons" }, el("li", { title: against.join("; ") }, "Shown as unknown: the daemon says nothing needs a person, but " + against.join("; "))));
  } else if (!neutral && att === undefined) {
    card.append(el("ul", { class: "zc-reasons" }, el("li", {}, "The daemon did not say whether anything needs a person.")));
  } else if (reasons.length) {
    const shown = reasons.slice(0, MAX_REASONS).map((r) => el("li", { title: r }, r));
    if (reasons.length > MAX_REASONS) shown.push(el("li", { class: "more" }, "and " + (reasons.length - MAX_REASONS) + " more on the zone page"));
    card.append(el("ul", { class: "zc-reasons" }, shown));
  }
  if (classified) {
    card.append(
      ws
        ? el("div", { class: "zc-share" },
          el("span", { class: "zc-share-text" }, "≥" + ws.size + " µm: ", el("strong", {}, pct(ws.share)), " of limit", ws.mean ? ", " + z.window + " mean" : ", latest"),
          shareBar(ws.share))
        : el("div", { class: "zc-share none" }, "No current concentration"),
    );
  }
  const meta = [];
  if ((z.locations || []).length) meta.push(z.locations.length + (z.locations.length === 1 ? " location" : " locations") + (stale ? " (" + stale + " not current)" : ""));
  if (alarms.length) meta.push(alarms.length + (alarms.length === 1 ? " alarm open" : " alarms open"));
  if (latest) meta.push("reading " + ago(latest, now));
  if (meta.length) card.append(el("div", { class: "zc-meta" }, meta.join(" · ")));
  if (alarms.length) {
    // The most severe open alarm, named with its own level.
    const top = alarms.find((a) => a.level === "action") || alarms[0];
    card.append(el("div", { class: "zc-alarm" }, levelBadge(top.level), " ", top.kind + (top.location ? " at " + top.location : top.sensor ? " at " + top.sensor : "")));
  }
  return card;
}

function areaCard(a) {
  return el("div", { class: "zone-card area", dataset: { zone: a.id, state: "none" } },
    el("div", { class: "zc-head" }, el("span", { class: "zc-name" }, a.name), el("span", { class: "zc-target" }, "Unclassified area")));
}

// sensorChip is one DP sensor. A sensor without a current value shows no
// number: a silent sensor says when it was last heard.
function sensorChip(s, alarms) {
  const status = dpStatus(s);
  const live = s.pa !== null && s.pa !== undefined && status !== "silent" && status !== "unknown";
  const chip = el("div", { class: "dp-chip", dataset: { sensor: s.id, state: status } },
    dpBadge(status),
    el("span", { class: "dp-value" }, live ? pa(s.pa) : "—"),
    live ? "" : el("span", { class: "dp-none" }, s.time ? "no current value, last heard " + timeText(s.time, true) : "no value yet"),
    el("span", { class: "dp-min" }, "min " + pa(s.min_pa) + (s.max_pa ? ", max " + pa(s.max_pa) : "")),
    el("span", { class: "dp-path" }, s.id + ": " + s.high + " ", el("span", { class: "arrow", "aria-label": "to" }, "→"), " " + s.low),
  );
  if (typeof s.door_openings === "number") chip.append(el("span", { class: "dp-doors" }, s.door_openings + (s.door_openings === 1 ? " door opening" : " door openings")));
  const raised = alarms.filter((a) => a.sensor === s.id && a.state !== "pending" && a.state !== "delayed");
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
      areas.map((a) => (byID.has(a.id) ? zoneCard(byID.get(a.id), now, alarms) : areaCard(a)))));
    const ids = new Set(areas.map((a) => a.id));
    const below = sensors.filter((s) => ids.has(s.high));
    if (below.length) rows.push(el("div", { class: "dp-row", "aria-label": "Differential pressure below " + areas.map((a) => a.id).join(", ") }, below.map((s) => sensorChip(s, alarms))));
  }
  // Zones on no cascade (the site has no sensors) still show.
  const placed = new Set(site.areas.map((a) => a.id));
  const rest = zones.filter((z) => !placed.has(z.id));
  if (rest.length) rows.push(el("div", { class: "cascade-row" }, rest.map((z) => zoneCard(z, now, alarms))));
  document.getElementById("cascade").replaceChildren(...rows);

  const open = alarms.filter((a) => a.state !== "pending" && a.state !== "delayed");
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
    const [zones, site, sensors, alarms] = await Promise.all([get("/api/v1/zones"), siteInfo(), get("/api/v1/sensors"), get("/api/v1/alarms?state=active")]);
    render(zones, site, sensors, alarms);
    banner(null);
  }, EVERY);
  mountEnvironment("env-table");
});
