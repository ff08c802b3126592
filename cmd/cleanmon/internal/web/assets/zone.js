// One zone: what needs a person (its attention, with the reasons), the
// particle state, limits and each location's values, concentration per
// location and size over time against the alert, action and class limits
// (log scale; this shift to a year, from the rollups beyond half a day),
// DP over time, every open alarm of the zone and the operating state.

import {
  init, get, request, poll, banner, explain, el, attentionBadge, clearContradicted, stateBadge, dpBadge, dpStatus, levelBadge, alarmStateBadge, num, pct, pa,
  targetText, OP_STATES, sizeKeys, timeEl, timeText, ago, siteInfo, session, onSession, reauthHref,
} from "./common.js";
import { startRuns } from "./zone-runs.js";
import { timeChart } from "./chart.js";
import { mountEnvironment } from "./environment.js";

const HOUR = 3600e3;
const DAY = 24 * HOUR;

// Ranges by the site's shifts and the calendar. Each gives [from, to) at
// the moment it is drawn; raw readings up to half a day, rollups beyond
// (a year is 8 760 hourly rows per location).
const RANGES = {
  shift: { label: "This shift", span: (st, now) => [Date.parse(st.shift.start), now] },
  "last-shift": { label: "Last shift", span: (st) => [Date.parse(st.last_shift.start), Date.parse(st.last_shift.end)] },
  "24h": { label: "24 h", span: (st, now) => [now - DAY, now] },
  week: { label: "Week", span: (st, now) => [now - 7 * DAY, now] },
  month: { label: "Month", span: (st, now) => [now - 30 * DAY, now] },
  year: { label: "Year", span: (st, now) => [now - 365 * DAY, now] },
  certified: { label: "Since the last certification", span: (st, now) => [Date.parse(zone.last_certified), now] },
};
// Older addresses keep working.
const OLD_RANGES = { "1h": "shift", "6h": "shift", "7d": "week", "30d": "month", "1y": "year" };
const STEP_MS = { "5m": 5 * 60e3, "30m": 30 * 60e3, "1h": HOUR };

// stepFor picks raw readings or the rollup step for a span.
function stepFor(span) {
  if (span <= 12 * HOUR) return "";
  if (span <= 2 * DAY) return "5m";
  if (span <= 10 * DAY) return "30m";
  return "1h";
}

const zoneID = decodeURIComponent(location.pathname.replace(/^\/zones\//, "").replace(/\/$/, ""));
const api = "/api/v1/zones/" + encodeURIComponent(zoneID);
const params = new URLSearchParams(location.search);
let range = OLD_RANGES[params.get("range")] || (RANGES[params.get("range")] ? params.get("range") : "shift");
let zone = null;
let sensorList = null;
let chartGen = 0;

function setMsg(id, text, kind) {
  const m = document.getElementById(id);
  m.textContent = text;
  m.className = "msg" + (kind ? " " + kind : "");
}

// current: a location whose latest values may be shown as now.
function current(l) {
  return l.fresh !== false && l.trusted !== false && !!l.time;
}

function renderHead(z) {
  document.title = (z.name || z.id) + " · cleanmon";
  document.getElementById("crumb-zone").textContent = z.name || z.id;
  const change = z.operating_state_change;
  const att = Object.hasOwn(z, "attention") ? z.attention : undefined;
  // Clear only when nothing the page can see contradicts it.
  const against = att === "none" ? clearContradicted(z) : [];
  const shown = against.length ? "unknown" : att;
  const reasons = Array.isArray(z.attention_reasons) ? z.attention_reasons.slice() : [];
  if (att === undefined) reasons.unshift("The daemon did not say whether anything needs a person.");
  if (shown !== att) reasons.unshift("Shown as unknown: the daemon says nothing needs a person, but " + against.join("; ") + ".");
  document.getElementById("zone-head").replaceChildren(
    el("h1", {}, z.name || z.id),
    attentionBadge(shown, "big headline"),
    el("span", { class: "facts" }, "Particles ", stateBadge(z.state, "small"), " · ", targetText(z), " · ", OP_STATES[z.operating_state] || z.operating_state,
      z.limits_state && z.limits_state !== z.operating_state ? " (judged against " + (OP_STATES[z.limits_state] || z.limits_state).toLowerCase() + " limits)" : "",
      " · window " + z.window,
      z.clean_up_until ? [" · clean-up until ", timeEl(z.clean_up_until, true)] : ""),
    reasons.length ? el("ul", { class: "reasons" }, reasons.map((r) => el("li", {}, r))) : "",
    el("span", { class: "muted" }, "evaluated ", timeEl(z.evaluated_at, true),
      change ? [" · state set by " + change.by + (change.reason ? " (" + change.reason + ")" : "") + " ", timeEl(change.since, true)] : ""),
  );
  const head = document.getElementById("zone-head");
  head.dataset.state = z.state;
  head.dataset.attention = shown === undefined ? "unknown" : shown;

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
    el("tbody", {}, z.locations.map((l) => {
      const now = current(l);
      const why = now ? "" : l.trusted === false ? "not trusted" + (l.untrusted ? ": " + l.untrusted : "") : l.time ? "not current (stale)" : "";
      return el("tr", { dataset: { location: l.id, current: now ? "yes" : "no" } },
        el("td", {}, l.name ? l.name + " (" + l.id + ")" : l.id, el("br"), el("span", { class: "muted" }, "counter " + l.counter)),
        el("td", {}, stateBadge(l.state)),
        el("td", {}, l.time ? [timeEl(l.time, true), " (" + ago(l.time) + ")"] : "none yet",
          why ? [el("br"), el("span", { class: "warn" }, why)] : "",
          l.status && l.status !== "ok" ? [el("br"), "status " + l.status] : ""),
        sizes.map((s) => {
          const lim = z.limits_per_m3[s];
          const mean = now && l.mean_per_m3 ? l.mean_per_m3[s] : undefined;
          const latest = now && l.concentration_per_m3 ? l.concentration_per_m3[s] : undefined;
          return [
            el("td", { class: "n" }, latest === undefined ? "—" : num(latest)),
            el("td", { class: "n" + (lim && mean > lim ? " over" : "") }, mean === undefined ? "—" : num(mean), lim && mean !== undefined ? el("br") : "", lim && mean !== undefined ? el("span", { class: "muted" }, pct(mean / lim) + " of limit") : ""),
          ];
        }),
      );
    })));
  document.getElementById("zone-table").replaceChildren(limits, el("br"), locs);
  document.getElementById("zone-notes").replaceChildren(...(z.notes || []).map((n) => el("li", {}, n)));
  renderSensors(z);
  renderAlarms(z);
  renderRanges();
}

// renderSensors lists the DP sensors the zone object names, with their
// status and door openings; a sensor without a current value shows none.
function renderSensors(z) {
  const box = document.getElementById("zone-sensors");
  if (!Array.isArray(z.sensors) || !z.sensors.length) {
    box.replaceChildren();
    return;
  }
  box.replaceChildren(el("ul", { class: "sensor-list" }, z.sensors.map((s) => {
    const st = dpStatus(s);
    const live = s.pa !== null && s.pa !== undefined && st !== "silent" && st !== "unknown";
    return el("li", { dataset: { sensor: s.id || s.sensor, state: st } }, dpBadge(st), " ", (s.id || s.sensor) + ": ",
      live ? pa(s.pa) : el("span", { class: "muted" }, "no current value"),
      typeof s.door_openings === "number" ? " · " + s.door_openings + (s.door_openings === 1 ? " door opening" : " door openings") + " (dips shorter than the delay)" : "");
  })));
}

// renderAlarms lists every open alarm of the zone from the zone object:
// no download of the site's alarm history.
function renderAlarms(z) {
  const box = document.getElementById("zone-alarms");
  if (!Array.isArray(z.active_alarms)) {
    box.replaceChildren(el("p", { class: "msg error" }, "The daemon did not list this zone's open alarms: see the alarms page."));
    return;
  }
  const mine = z.active_alarms;
  if (!mine.length) {
    box.replaceChildren(el("p", { class: "muted" }, "No alarm open in this zone."));
    return;
  }
  const td = (label, cls, ...c) => el("td", { class: cls, dataset: { label } }, ...c);
  box.replaceChildren(el("table", { class: "alarm-table" },
    el("thead", {}, el("tr", {}, ["State", "Level", "Kind", "Where", "Since", "Peak", "Message", "Acknowledged", ""].map((h) => el("th", {}, h)))),
    el("tbody", {}, mine.map((a) => el("tr", { dataset: { alarmId: a.id, state: a.state } },
      td("State", "", alarmStateBadge(a.state)),
      td("Level", "", levelBadge(a.level)),
      td("Kind", "", a.kind),
      td("Where", "", [a.location, a.size_um ? "≥" + a.size_um + " µm" : "", a.sensor].filter(Boolean).join(" · ") || "—"),
      td("Since", "", timeEl(a.since, true)),
      td("Peak", "", typeof a.peak === "number" && a.peak_time ? [num(a.peak) + (a.unit ? " " + a.unit : ""), " at ", timeEl(a.peak_time, true)] : "—"),
      td("Message", "wide", a.message),
      td("Acknowledged", "", a.acknowledged_by ? a.acknowledged_by + (a.comment ? ": " + a.comment : "") : "—"),
      td("", "", el("a", { class: "investigate", href: "/alarms/" + encodeURIComponent(a.id).replace(/%3A/gi, ":") + "/investigation" }, "Investigate")),
    )))));
}

// renderRanges marks the chosen range and says why one cannot be chosen.
function renderRanges() {
  const known = zone && zone.last_certified && Number.isFinite(Date.parse(zone.last_certified));
  for (const b of document.querySelectorAll("[data-range]")) {
    b.setAttribute("aria-pressed", String(b.dataset.range === range));
    if (b.dataset.range === "certified") {
      b.disabled = !known;
      b.title = known ? "Since " + timeText(zone.last_certified, true) : "cleanmon does not know when this zone was last certified";
    }
  }
  document.getElementById("range-note").textContent = known ? "" : "“Since the last certification” is not available: cleanmon does not know when this zone was last certified.";
}

async function refreshHead() {
  const z = await get(api);
  const first = zone === null;
  zone = z;
  if (range === "certified" && !z.last_certified) range = "shift";
  renderHead(z);
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
  renderRanges();
  const st = await siteInfo(true);
  if (gen !== chartGen) return;
  const r = RANGES[range];
  let [from, to] = r.span(st, Date.now());
  if (!Number.isFinite(from) || !Number.isFinite(to) || to <= from) [from, to] = [Date.now() - DAY, Date.now()];
  const step = stepFor(to - from);
  const q = new URLSearchParams({ from: new Date(from).toISOString(), to: new Date(to).toISOString() });
  if (step) q.set("step", step);
  const info = document.getElementById("chart-info");
  info.textContent = "Loading " + r.label.toLowerCase() + " (" + timeText(from, true) + " – " + timeText(to, true) + ")…";
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
  const rolled = !!step;
  const by = seriesOf(rows, rolled, sizes);
  const showMax = rolled && document.getElementById("show-max").checked;
  const charts = [];
  const names = new Map(zone.locations.map((l) => [l.id, l.name ? l.id + " " + l.name : l.id]));
  for (const k of sizes) {
    const series = [];
    for (const [loc, s] of by) {
      const t = Float64Array.from(s.t);
      const gap = rolled ? STEP_MS[step] * 1.5 : Math.max(3 * medianGap(s.t), 120e3);
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
      title: "≥" + k + " µm" + (rolled ? ", mean per " + step : ""),
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
    info.textContent = r.label + ", " + timeText(from, true) + " – " + timeText(to, true) + ": " + points + (rolled ? " rolled-up rows (step " + step + ")" : " readings") +
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
  if (!sensorList) sensorList = await get("/api/v1/sensors");
  const capped = to - from > DP_SPAN;
  if (capped) from = to - DP_SPAN;
  const sensors = sensorList.filter((s) => s.high === zoneID || s.low === zoneID);
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
      reason: document.getElementById("opstate-reason").value.trim(),
    };
    const s = session();
    if (s && s.person) {
      body.signature = { meaning: "performed", password: document.getElementById("opstate-password").value };
      document.getElementById("opstate-password").value = "";
    } else {
      body.by = document.getElementById("opstate-by").value.trim();
    }
    setMsg("opstate-msg", "Sending…");
    try {
      const z = await request("PUT", api + "/state", body);
      zone = z;
      renderHead(z);
      setMsg("opstate-msg", "Operating state is now " + (OP_STATES[z.operating_state] || z.operating_state) + ".", "ok");
      document.getElementById("opstate-reason").value = "";
    } catch (e) {
      setMsg("opstate-msg", explain(e, "Changing the operating state"), "error");
      if (e.status === 401 && s && s.method === "oidc") {
        document.getElementById("opstate-msg").append(" ", el("a", { href: reauthHref(), id: "reauth-link" }, "Sign in at the provider again"));
      }
    }
  });
  // A person signs with the password (a provider sign-in signs by a
  // fresh sign-in instead); a token's user types a name as a remark.
  onSession((s) => {
    document.getElementById("opstate-by-box").hidden = !!s.person;
    document.getElementById("opstate-sign").hidden = !s.person || s.method === "oidc";
  });
}

init().then(() => {
  wireControls();
  startRuns();
  poll(refreshHead, 5000);
  mountEnvironment("env-table", zoneID);
  setInterval(() => {
    if (range === "shift") drawCharts();
  }, 30000);
});
