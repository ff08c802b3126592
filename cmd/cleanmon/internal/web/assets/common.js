// Shared by every page: the API client with the page's token, the sign-in
// box, the state vocabulary (word, shape and colour) and DOM helpers that
// never parse markup, so no value from the API can become HTML.

const TOKEN_KEY = "cleanmon.token";
const SVG_NS = "http://www.w3.org/2000/svg";

// --- token -------------------------------------------------------------

// The token lives in sessionStorage: gone when the tab closes, never in a
// cookie (so no request carries it unless this code adds it), never shown.
export function token() {
  try {
    return sessionStorage.getItem(TOKEN_KEY) || "";
  } catch {
    return "";
  }
}

function setToken(t) {
  try {
    if (t) sessionStorage.setItem(TOKEN_KEY, t);
    else sessionStorage.removeItem(TOKEN_KEY);
  } catch {
    // storage refused (private mode): the token lasts for this page only
  }
}

// --- API ----------------------------------------------------------------

export class APIError extends Error {
  constructor(status, message, field) {
    super(message);
    this.status = status;
    this.field = field || "";
  }
}

// request sends one request to the API of this origin with the token and
// returns the decoded JSON (or, with raw, the text). Errors become an
// APIError with the API's own message.
export async function request(method, path, body, { raw = false, signal } = {}) {
  const headers = { Accept: "application/json" };
  const t = token();
  if (t) headers.Authorization = "Bearer " + t;
  // A person's session rides on its cookie; a state-changing request
  // echoes the session's CSRF token, and a read the page makes by itself
  // does not count as the person's activity (idle time-out).
  if (method === "GET") headers["X-Cleanmon-Background"] = "1";
  else if (sessionInfo && sessionInfo.csrf) headers["X-CSRF-Token"] = sessionInfo.csrf;
  const init = { method, headers, signal, cache: "no-store", credentials: "same-origin" };
  if (body !== undefined) {
    headers["Content-Type"] = "application/json";
    init.body = JSON.stringify(body);
  }
  let resp;
  try {
    resp = await fetch(path, init);
  } catch (e) {
    if (e.name === "AbortError") throw e;
    throw new APIError(0, "the daemon cannot be reached (" + e.message + ")");
  }
  const text = await resp.text();
  if (!resp.ok) {
    let msg = resp.status + " " + resp.statusText;
    let field = "";
    try {
      const j = JSON.parse(text);
      if (j && j.error) {
        msg = j.error;
        field = j.field || "";
      }
    } catch {
      // not JSON: keep the status line
    }
    throw new APIError(resp.status, msg, field);
  }
  if (raw) return text;
  return text ? JSON.parse(text) : null;
}

export const get = (path, opts) => request("GET", path, undefined, opts);

// download gets a file from the API (with the token) and hands it to the
// browser as a download: a plain link could not send the token.
export async function download(path, fallbackName) {
  const headers = {};
  const t = token();
  if (t) headers.Authorization = "Bearer " + t;
  const resp = await fetch(path, { headers, cache: "no-store", credentials: "same-origin" });
  if (!resp.ok) {
    let msg = resp.status + " " + resp.statusText;
    try {
      const j = await resp.json();
      if (j && j.error) msg = j.error;
    } catch {
      // keep the status line
    }
    throw new APIError(resp.status, msg);
  }
  const blob = await resp.blob();
  const cd = resp.headers.get("Content-Disposition") || "";
  const m = /filename="([^"]+)"/.exec(cd);
  const a = el("a", { href: URL.createObjectURL(blob), download: m ? m[1] : fallbackName });
  document.body.append(a);
  a.click();
  a.remove();
  setTimeout(() => URL.revokeObjectURL(a.href), 60000);
  return blob.size;
}

// explain turns an API error into a sentence for the operator, with what
// to do about a refused token.
export function explain(err, doing) {
  if (!(err instanceof APIError)) return doing + " failed: " + err.message;
  switch (err.status) {
    case 401:
      return doing + " needs a valid access token or a person signed in (top right). The daemon said: " + err.message + ".";
    case 403:
      if (err.message.includes("which may not")) {
        return doing + " is not allowed for this sign-in. It needs the operator role. The daemon said: " + err.message + ".";
      }
      return doing + " was refused. The daemon said: " + err.message + ".";
    case 0:
      return doing + " failed: " + err.message + ".";
  }
  return doing + " failed (" + err.status + "): " + err.message + ".";
}

// --- session and sign-in box ---------------------------------------------

let sessionInfo = null;
const sessionListeners = [];

export function session() {
  return sessionInfo;
}

export function onSession(fn) {
  sessionListeners.push(fn);
  if (sessionInfo) fn(sessionInfo);
}

const ANONYMOUS = { open: false, open_reads: false, signed_in: false, may_read: false, may_operate: false, person: false, may_sign: [] };

// signatureText is one signature as a line: meaning, who, when, and the
// start of the SHA-256 of what was signed.
export function signatureText(sig) {
  return sig.meaning + " by " + sig.full_name + " (" + sig.user + "), " + new Date(sig.time).toISOString().replace(".000Z", "Z") + ", SHA-256 " + sig.sha256.slice(0, 16) + "…";
}

// reauthLink sends a provider-signed-in person through the provider again
// before signing, back to this page.
export function reauthHref() {
  return "/auth/oidc/start?reauth=1&next=" + encodeURIComponent(location.pathname + location.search);
}

// refreshSession asks the daemon what the page's token may do and shows
// it. A token the daemon refuses is dropped at once.
async function refreshSession() {
  const who = document.getElementById("who");
  let s = null;
  let note = "";
  try {
    s = await get("/ui/session");
  } catch (e) {
    if (!(e instanceof APIError) || e.status === 0) {
      if (who) who.textContent = "Daemon unreachable.";
      return;
    }
    if (e.status === 401 && token()) {
      setToken("");
      note = "Token not accepted: signed out.";
      s = await get("/ui/session").catch(() => null);
    } else if (e.status === 403) {
      s = { ...ANONYMOUS, signed_in: true };
      note = "This token may not read: " + e.message + ".";
    } else if (e.status !== 401) {
      if (who) who.textContent = "Sign-in check failed: " + e.message;
      return;
    }
  }
  s = s || ANONYMOUS;
  sessionInfo = s;
  if (who) {
    if (note) who.textContent = note;
    else if (s.person) who.textContent = "Signed in as " + s.full_name + " (" + s.name + ", " + s.role + ")";
    else if (s.open) who.textContent = "Open demo: no token needed";
    else if (s.signed_in) who.textContent = "Signed in as " + s.name + " (" + s.role + ")";
    else if (s.open_reads) who.textContent = "Not signed in: reading only";
    else who.textContent = "Not signed in: sign in to see the data";
  }
  document.body.dataset.signedIn = s.signed_in ? "yes" : "no";
  document.body.dataset.mayOperate = s.may_operate ? "yes" : "no";
  const out = document.getElementById("signout-btn");
  const input = document.getElementById("token");
  const inBtn = document.getElementById("signin-btn");
  if (out) out.hidden = !s.signed_in;
  if (input) input.hidden = s.open || s.signed_in;
  if (inBtn) inBtn.hidden = s.open || s.signed_in;
  const link = document.getElementById("signin-link");
  if (link) {
    link.hidden = s.signed_in;
    link.href = "/signin?next=" + encodeURIComponent(location.pathname + location.search);
  }
  const nav = document.getElementById("nav-accounts");
  if (nav) nav.hidden = !s.may_admin;
  document.body.dataset.person = s.person ? "yes" : "no";
  for (const fn of sessionListeners) fn(s);
}

function wireSignIn() {
  const form = document.getElementById("signin");
  if (!form) return;
  const input = document.getElementById("token");
  form.addEventListener("submit", async (ev) => {
    ev.preventDefault();
    const v = input.value.trim();
    input.value = "";
    if (!v) return;
    setToken(v);
    await refreshSession();
  });
  document.getElementById("signout-btn").addEventListener("click", async () => {
    if (sessionInfo && sessionInfo.person) {
      // A plain form post: the daemon ends the session and sends us on.
      const f = el("form", { method: "post", action: "/auth/signout", hidden: true },
        el("input", { type: "hidden", name: "csrf_token", value: sessionInfo.csrf }));
      document.body.append(f);
      f.submit();
      return;
    }
    setToken("");
    await refreshSession();
  });
}

// --- state vocabulary ---------------------------------------------------

// Marks of two families that never look alike. A zone's state (and its
// attention, and a DP sensor's state) is a round gauge that fills as it
// gets worse, in a rounded pill: an open ring with a dot (nothing to do),
// a quarter, a half, a full disc. Unknown is a dashed, hatched ring with a
// "?", in a hatched pill, so that it cannot pass for any filled amount,
// in colour or in monochrome. An alarm is a pennant on a pole in a
// square-cornered tag with a heavy left edge. Every mark carries its word.

// ATTENTION is the headline of a zone: what needs a person.
export const ATTENTION = {
  none: { word: "CLEAR", icon: "gauge-0", cls: "in-class" },
  alert: { word: "ALERT", icon: "gauge-1", cls: "alert" },
  action: { word: "ACTION", icon: "gauge-2", cls: "action" },
  "out-of-class": { word: "OUT OF CLASS", icon: "gauge-4", cls: "out-of-class" },
  unknown: { word: "UNKNOWN", icon: "unknown", cls: "unknown" },
};

// STATES is the particle judgement of a zone or location.
export const STATES = {
  "in-class": { word: "IN CLASS", icon: "gauge-0", cls: "in-class" },
  alert: { word: "ALERT", icon: "gauge-1", cls: "alert" },
  action: { word: "ACTION", icon: "gauge-2", cls: "action" },
  "out-of-class": { word: "OUT OF CLASS", icon: "gauge-4", cls: "out-of-class" },
  unknown: { word: "UNKNOWN", icon: "unknown", cls: "unknown" },
};

// DP sensor states, on the same gauge by severity. "unknown" is what the
// sensors list said before it named silence.
export const DP_STATES = {
  ok: { word: "OK", icon: "gauge-0", cls: "in-class" },
  low: { word: "BELOW MIN", icon: "gauge-1", cls: "alert" },
  high: { word: "ABOVE MAX", icon: "gauge-1", cls: "alert" },
  reversed: { word: "REVERSED", icon: "gauge-4", cls: "out-of-class" },
  silent: { word: "SILENT", icon: "unknown", cls: "unknown" },
  unknown: { word: "NO DATA", icon: "unknown", cls: "unknown" },
};

// Alarm states: the pennant is raised, held, acknowledged or lowered.
export const ALARM_STATES = {
  delayed: { word: "DELAYED", icon: "hourglass", cls: "al-delayed" },
  active: { word: "ACTIVE", icon: "pennant-up", cls: "al-active" },
  acknowledged: { word: "ACKNOWLEDGED", icon: "pennant-ack", cls: "al-acked" },
  cleared: { word: "CLEARED", icon: "pennant-down", cls: "al-cleared" },
};

// Alarm levels, in the alarm family too.
export const LEVELS = {
  alert: { word: "ALERT LEVEL", icon: "pennant", cls: "al-alert" },
  action: { word: "ACTION LEVEL", icon: "pennant-up", cls: "al-action" },
};

// icon draws one mark as SVG in the current text colour.
export function icon(kind) {
  const svg = document.createElementNS(SVG_NS, "svg");
  svg.setAttribute("viewBox", "0 0 20 20");
  svg.setAttribute("class", "icon icon-" + kind);
  svg.setAttribute("aria-hidden", "true");
  svg.setAttribute("focusable", "false");
  const add = (tag, attrs) => {
    const n = document.createElementNS(SVG_NS, tag);
    for (const [k, v] of Object.entries(attrs)) n.setAttribute(k, v);
    svg.append(n);
    return n;
  };
  const ring = (dash) => add("circle", { cx: 10, cy: 10, r: 8.3, fill: "none", stroke: "currentColor", "stroke-width": 2.2, "stroke-dasharray": dash || "none" });
  const pole = () => add("path", { d: "M4 1.5V19", stroke: "currentColor", "stroke-width": 2.2, "stroke-linecap": "round", fill: "none" });
  switch (kind) {
    case "gauge-0":
      ring();
      add("circle", { cx: 10, cy: 10, r: 2.6, fill: "currentColor" });
      break;
    case "gauge-1":
      ring();
      add("path", { d: "M10 10V2.6A7.4 7.4 0 0 1 17.4 10z", fill: "currentColor" });
      break;
    case "gauge-2":
      ring();
      add("path", { d: "M10 2.6A7.4 7.4 0 0 1 10 17.4z", fill: "currentColor" });
      break;
    case "gauge-4":
      add("circle", { cx: 10, cy: 10, r: 9.4, fill: "currentColor" });
      break;
    case "hourglass":
      add("path", { d: "M4 2h12M4 18h12M5.5 2.5c0 5 9 5 9 15M14.5 2.5c0 5-9 5-9 15", stroke: "currentColor", "stroke-width": 2, fill: "none", "stroke-linecap": "round" });
      break;
    case "pennant":
      pole();
      add("path", { d: "M5 2.5L17.5 6.5 5 10.5z", fill: "none", stroke: "currentColor", "stroke-width": 1.8, "stroke-linejoin": "round" });
      break;
    case "pennant-up":
      pole();
      add("path", { d: "M5 2L18.5 6.5 5 11z", fill: "currentColor" });
      break;
    case "pennant-ack":
      pole();
      add("path", { d: "M5 2L18.5 6.5 5 11z", fill: "currentColor" });
      add("path", { d: "M9 15.5l2.5 2.5 5-5.5", stroke: "currentColor", "stroke-width": 2.2, fill: "none", "stroke-linecap": "round", "stroke-linejoin": "round" });
      break;
    case "pennant-down":
      pole();
      add("path", { d: "M5 11.5L17.5 15 5 18.5z", fill: "none", stroke: "currentColor", "stroke-width": 1.8, "stroke-linejoin": "round" });
      break;
    default: {
      // unknown: a dashed ring, hatched inside, with a question mark
      ring("3 2.4");
      add("path", { d: "M5 13L13 5M7 15L15 7", stroke: "currentColor", "stroke-width": 1, opacity: 0.45 });
      add("text", { x: 10, y: 14.6, "text-anchor": "middle", "font-size": 13, "font-weight": 800, fill: "currentColor" }).textContent = "?";
    }
  }
  return svg;
}

// clearContradicted lists what the page itself sees in a zone object that
// forbids the clear headline: the particle state not in class, an open
// alarm, a location that is not fresh and trusted, a DP sensor on its
// boundary that is not ok. Empty: nothing contradicts the daemon.
export function clearContradicted(z) {
  const out = [];
  if (z.state !== "in-class") out.push("the particle state is " + (STATES[z.state] ? STATES[z.state].word.toLowerCase() : "unknown"));
  const open = (Array.isArray(z.active_alarms) ? z.active_alarms : []).filter((a) => a.state !== "cleared" && a.state !== "delayed");
  if (open.length) out.push(open.length + (open.length === 1 ? " alarm is open" : " alarms are open"));
  const stale = (z.locations || []).filter((l) => l.fresh === false || l.trusted === false).map((l) => l.id);
  if (stale.length) out.push("not current: " + stale.join(", "));
  const dp = (Array.isArray(z.sensors) ? z.sensors : []).filter((s) => dpStatus(s) !== "ok").map((s) => (s.id || s.sensor) + " " + dpStatus(s));
  if (dp.length) out.push("DP " + dp.join(", "));
  return out;
}

// badgeOf is a mark with its word; cls picks the colours, family the
// shape of the pill (zone states) or tag (alarms).
function badgeOf(def, family, extra) {
  return el("span", { class: family + " st-" + def.cls + (extra ? " " + extra : "") }, icon(def.icon), el("span", { class: "word" }, def.word));
}

// attentionBadge is a zone's headline. An absent or unrecognised
// attention is UNKNOWN: never the clear mark by default.
export function attentionBadge(attention, extra) {
  const known = Object.hasOwn(ATTENTION, attention || "");
  const b = badgeOf(known ? ATTENTION[attention] : ATTENTION.unknown, "badge", extra);
  b.dataset.attention = known ? attention : "unknown";
  return b;
}

export function stateBadge(state, extra) {
  const known = Object.hasOwn(STATES, state || "");
  const b = badgeOf(known ? STATES[state] : STATES.unknown, "badge", extra);
  b.dataset.state = known ? state : "unknown";
  return b;
}

// dpStatus is a sensor's status, whichever of the two names the API uses.
export function dpStatus(s) {
  return s.status || s.state || "unknown";
}

export function dpBadge(state, extra) {
  const def = Object.hasOwn(DP_STATES, state || "") ? DP_STATES[state] : DP_STATES.unknown;
  const b = badgeOf(def, "badge", extra);
  b.dataset.state = state;
  return b;
}

export function alarmStateBadge(state) {
  const def = Object.hasOwn(ALARM_STATES, state || "") ? ALARM_STATES[state] : { word: String(state).toUpperCase(), icon: "hourglass", cls: "al-delayed" };
  const b = badgeOf(def, "tag");
  b.dataset.state = state;
  return b;
}

export function levelBadge(level) {
  const def = Object.hasOwn(LEVELS, level || "") ? LEVELS[level] : { word: String(level).toUpperCase(), icon: "pennant", cls: "al-alert" };
  const b = badgeOf(def, "tag");
  b.dataset.level = level;
  return b;
}

// fillLegendIcons puts the shapes into a static legend's <i data-icon>.
function fillLegendIcons() {
  for (const n of document.querySelectorAll("[data-icon]")) {
    n.replaceChildren(icon(n.dataset.icon));
  }
}

// --- DOM helpers ---------------------------------------------------------

// el builds an element; strings become text nodes, never markup.
export function el(tag, attrs, ...children) {
  const n = document.createElement(tag);
  for (const [k, v] of Object.entries(attrs || {})) {
    if (v === undefined || v === null || v === false) continue;
    if (k === "dataset") Object.assign(n.dataset, v);
    else if (k.startsWith("on")) n.addEventListener(k.slice(2), v);
    else if (v === true) n.setAttribute(k, "");
    else n.setAttribute(k, String(v));
  }
  for (const c of children.flat(Infinity)) {
    if (c === undefined || c === null || c === false) continue;
    n.append(c instanceof Node ? c : document.createTextNode(String(c)));
  }
  return n;
}

export function svgEl(tag, attrs) {
  const n = document.createElementNS(SVG_NS, tag);
  for (const [k, v] of Object.entries(attrs || {})) n.setAttribute(k, String(v));
  return n;
}

// --- formatting ------------------------------------------------------------

// num writes a concentration as the reports do: whole numbers with thin
// spaces between thousands, small values with up to 3 significant figures.
export function num(v) {
  if (v === null || v === undefined || Number.isNaN(v)) return "—";
  const a = Math.abs(v);
  let s;
  if (a >= 100) s = Math.round(v).toString();
  else if (a >= 10) s = v.toFixed(1);
  else if (a === 0) s = "0";
  else s = v.toPrecision(3);
  const [int, frac] = s.split(".");
  const neg = int.startsWith("-");
  const digits = neg ? int.slice(1) : int;
  const grouped = digits.replace(/\B(?=(\d{3})+(?!\d))/g, "\u2009");
  return (neg ? "−" : "") + grouped + (frac ? "." + frac : "");
}

export function pa(v) {
  if (v === null || v === undefined) return "—";
  return (v < 0 ? "−" : "") + Math.abs(v).toFixed(1) + " Pa";
}

export function pct(v) {
  if (v === null || v === undefined || !Number.isFinite(v)) return "—";
  return (v >= 10 ? Math.round(v * 100).toString() : (v * 100).toFixed(v < 0.1 ? 1 : 0)) + " %";
}

// --- the site's clock -----------------------------------------------------

// Every time is shown in the site's time zone (from GET /ui/site), in
// 24-hour ISO form, never in the browser's locale or zone: a wall screen,
// a laptop abroad and the printed report must agree. Until the site's zone
// is known, times are shown in UTC and say so.
let siteTZ = "UTC";
let tzFormat = null;

function setTimeZone(name) {
  try {
    tzFormat = new Intl.DateTimeFormat("en-GB", {
      timeZone: name, hourCycle: "h23",
      year: "numeric", month: "2-digit", day: "2-digit", hour: "2-digit", minute: "2-digit", second: "2-digit",
    });
    siteTZ = name;
  } catch {
    // a zone this browser does not know: UTC, and the label says so
    tzFormat = null;
    siteTZ = "UTC";
  }
  const n = document.getElementById("tz");
  if (n) {
    n.textContent = "Times: " + tzLabel();
    n.dataset.tz = siteTZ;
  }
}

// wallParts is the site's wall clock at ms: numbers y, mo, d, h, mi, s.
export function wallParts(ms) {
  if (!tzFormat) {
    const d = new Date(ms);
    return { y: d.getUTCFullYear(), mo: d.getUTCMonth() + 1, d: d.getUTCDate(), h: d.getUTCHours(), mi: d.getUTCMinutes(), s: d.getUTCSeconds() };
  }
  const p = {};
  for (const x of tzFormat.formatToParts(new Date(ms))) p[x.type] = x.value;
  return { y: +p.year, mo: +p.month, d: +p.day, h: +p.hour % 24, mi: +p.minute, s: +p.second };
}

// offsetMinutes is the site's offset from UTC at ms.
export function offsetMinutes(ms) {
  const w = wallParts(ms);
  const asUTC = Date.UTC(w.y, w.mo - 1, w.d, w.h, w.mi, w.s);
  return Math.round((asUTC - Math.floor(ms / 1000) * 1000) / 60000);
}

// fromWall is the instant at which the site's clock reads the given wall
// time (month 1–12); in a gap or an overlap of summer time, the earlier.
export function fromWall(y, mo, d, h, mi, s) {
  const guess = Date.UTC(y, mo - 1, d, h || 0, mi || 0, s || 0);
  let t = guess - offsetMinutes(guess) * 60000;
  t = guess - offsetMinutes(t) * 60000;
  return t;
}

const p2 = (n) => String(n).padStart(2, "0");

function offsetText(min) {
  return (min < 0 ? "−" : "+") + p2(Math.floor(Math.abs(min) / 60)) + ":" + p2(Math.abs(min) % 60);
}

// tzLabel names the site's zone and its offset now: "CET, UTC+01:00".
export function tzLabel() {
  return siteTZ + (siteTZ === "UTC" ? "" : ", UTC" + offsetText(offsetMinutes(Date.now())));
}

export function siteTimeZone() {
  return siteTZ;
}

// timeText is "HH:MM:SS", or with the date "YYYY-MM-DD HH:MM:SS", on the
// site's clock.
export function timeText(iso, withDate) {
  if (!iso) return "—";
  const ms = typeof iso === "number" ? iso : Date.parse(iso);
  if (!Number.isFinite(ms)) return "—";
  const w = wallParts(ms);
  const hms = p2(w.h) + ":" + p2(w.mi) + ":" + p2(w.s);
  return withDate ? w.y + "-" + p2(w.mo) + "-" + p2(w.d) + " " + hms : hms;
}

// isoText is the full ISO 8601 form with the site's offset, for tooltips
// and machine-readable attributes.
export function isoText(ms) {
  const w = wallParts(ms);
  return w.y + "-" + p2(w.mo) + "-" + p2(w.d) + "T" + p2(w.h) + ":" + p2(w.mi) + ":" + p2(w.s) + offsetText(offsetMinutes(ms)).replace("−", "-");
}

export function timeEl(iso, withDate) {
  const ms = iso ? Date.parse(iso) : NaN;
  const ok = Number.isFinite(ms);
  return el("time", { datetime: ok ? new Date(ms).toISOString() : "", title: ok ? isoText(ms) + " (" + siteTZ + ")" : "" }, timeText(iso, withDate));
}

export function ago(iso, now) {
  if (!iso) return "never";
  const s = Math.max(0, Math.round(((now || Date.now()) - new Date(iso).getTime()) / 1000));
  if (s < 90) return s + " s ago";
  if (s < 5400) return Math.round(s / 60) + " min ago";
  if (s < 172800) return Math.round(s / 3600) + " h ago";
  return Math.round(s / 86400) + " d ago";
}

export function targetText(z) {
  if (z.class !== null && z.class !== undefined) return "ISO " + z.class;
  if (z.grade) return "Grade " + z.grade;
  return "Unclassified";
}

export const OP_STATES = {
  "at-rest": "AT REST",
  "in-operation": "IN OPERATION",
  maintenance: "MAINTENANCE",
};

// sizes sorts size keys ("0.5", "5") by value.
export function sizeKeys(m) {
  return Object.keys(m || {}).sort((a, b) => parseFloat(a) - parseFloat(b));
}

// --- page frame ---------------------------------------------------------------

// banner shows a page-wide message (unreachable daemon, refused token);
// null hides it.
export function banner(msg) {
  const b = document.getElementById("banner");
  if (!b) return;
  b.hidden = !msg;
  b.textContent = msg || "";
}

// poll runs fn now and then every `every` ms, never two at once; a
// failing call shows in the banner and is retried on the next tick.
export function poll(fn, every) {
  let running = false;
  let timer = 0;
  const tick = async () => {
    if (running) return;
    running = true;
    try {
      await fn();
    } catch (e) {
      banner(explain(e, "Updating"));
    } finally {
      running = false;
    }
  };
  tick();
  timer = setInterval(tick, every);
  return {
    stop: () => clearInterval(timer),
    now: tick,
  };
}

// siteInfo is GET /ui/site, fetched again at most every 30 s: the
// layout, the site's zone and its shifts (the current shift moves).
let siteCache = null;
let siteAt = 0;

export async function siteInfo(fresh) {
  if (!siteCache || fresh || Date.now() - siteAt > 30000) {
    siteCache = await get("/ui/site");
    siteAt = Date.now();
    setTimeZone(siteCache.time_zone || "UTC");
  }
  return siteCache;
}

export async function init() {
  const page = document.body.dataset.page;
  for (const a of document.querySelectorAll("[data-nav]")) {
    if (a.dataset.nav === page) a.setAttribute("aria-current", "page");
  }
  setTimeZone("UTC");
  fillLegendIcons();
  wireSignIn();
  await refreshSession();
  // The clock needs read access; without it times stay in UTC, labelled.
  await siteInfo(true).catch(() => null);
  sessionListeners.push(() => siteInfo(true).catch(() => null));
}
