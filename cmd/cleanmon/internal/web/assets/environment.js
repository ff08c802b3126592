// Temperature, relative humidity and airflow velocity: a table of each
// environment sensor's latest values against its bands, for the zone page
// (one zone) and the overview (every zone). A value that is missing or not
// fresh is shown as NO DATA, never as within its band.

import { get, poll, el, icon, num, timeEl } from "./common.js";

const CHANNELS = [
  ["temperature_c", "Temperature"],
  ["humidity_pct", "Relative humidity"],
  ["velocity_m_s", "Airflow velocity"],
];

const ENV_STATES = {
  ok: { word: "IN BAND", icon: "gauge-0", cls: "in-class" },
  alert: { word: "OUTSIDE ALERT BAND", icon: "gauge-1", cls: "alert" },
  action: { word: "OUTSIDE ACTION BAND", icon: "gauge-2", cls: "action" },
  unknown: { word: "NO DATA", icon: "unknown", cls: "unknown" },
};

function envBadge(state) {
  const def = ENV_STATES[state] || ENV_STATES.unknown;
  const b = el("span", { class: "badge st-" + def.cls }, icon(def.icon), el("span", { class: "word" }, def.word));
  b.dataset.state = ENV_STATES[state] ? state : "unknown";
  return b;
}

function bandText(b, unit) {
  if (!b) return "–";
  const lo = b.low === undefined ? "" : num(b.low);
  const hi = b.high === undefined ? "" : num(b.high);
  if (lo && hi) return lo + "–" + hi + " " + unit;
  if (lo) return "≥ " + lo + " " + unit;
  if (hi) return "≤ " + hi + " " + unit;
  return "–";
}

function table(sensors, withZone) {
  const head = ["Sensor", "Where"].concat(withZone ? ["Zone"] : [], ["Quantity", "Value", "Alert band", "Action band", "State", "Sampled"]);
  const rows = [];
  for (const s of sensors) {
    for (const [ch, label] of CHANNELS) {
      const c = s.channels && s.channels[ch];
      if (!c) continue;
      const value = c.value === null || c.value === undefined ? "—" : num(c.value) + " " + c.unit;
      rows.push(el("tr", { dataset: { sensor: s.id, channel: ch, state: c.state } },
        el("td", {}, s.id),
        el("td", {}, s.location || ""),
        withZone ? el("td", {}, el("a", { href: "/zones/" + encodeURIComponent(s.zone) }, s.zone)) : null,
        el("td", {}, label),
        el("td", { class: "num" }, value),
        el("td", {}, bandText(c.alert, c.unit)),
        el("td", {}, bandText(c.action, c.unit)),
        el("td", {}, envBadge(c.state)),
        el("td", {}, s.time ? timeEl(s.time) : "never")));
    }
  }
  return el("table", { class: "env-table" },
    el("thead", {}, el("tr", {}, head.map((h) => el("th", { scope: "col" }, h)))),
    el("tbody", {}, rows));
}

// mountEnvironment fills the element with id `where` and keeps it fresh;
// with zone, only that zone's sensors. The panel stays hidden on a site
// without environment sensors.
export function mountEnvironment(where, zone) {
  const box = document.getElementById(where);
  if (!box) return;
  const panel = box.closest("section");
  const path = "/api/v1/environment" + (zone ? "?zone=" + encodeURIComponent(zone) : "");
  poll(async () => {
    const sensors = await get(path);
    if (panel) panel.hidden = sensors.length === 0;
    box.replaceChildren(table(sensors, !zone));
  }, 30e3);
}
