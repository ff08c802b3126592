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
  const init = { method, headers, signal, cache: "no-store", credentials: "omit" };
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
  const resp = await fetch(path, { headers, cache: "no-store", credentials: "omit" });
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
      return doing + " needs a valid access token: sign in (top right). The daemon said: " + err.message + ".";
    case 403:
      return doing + " is not allowed for this token. It needs the operator role. The daemon said: " + err.message + ".";
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

const ANONYMOUS = { open: false, open_reads: false, signed_in: false, may_read: false, may_operate: false };

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
    setToken("");
    await refreshSession();
  });
}

// --- state vocabulary ---------------------------------------------------

// Every state has a word, a shape and a colour, so that it reads without
// colour (colour-blind operators, monochrome print) and from across a room.
export const STATES = {
  "in-class": { word: "IN CLASS", icon: "check" },
  alert: { word: "ALERT", icon: "triangle" },
  action: { word: "ACTION", icon: "diamond" },
  "out-of-class": { word: "OUT OF CLASS", icon: "cross" },
  unknown: { word: "UNKNOWN", icon: "question" },
};

// DP sensor states, drawn with the same shapes by severity.
export const DP_STATES = {
  ok: { word: "OK", icon: "check", cls: "in-class" },
  low: { word: "BELOW MIN", icon: "triangle", cls: "alert" },
  high: { word: "ABOVE MAX", icon: "triangle", cls: "alert" },
  reversed: { word: "REVERSED", icon: "cross", cls: "out-of-class" },
  unknown: { word: "NO DATA", icon: "question", cls: "unknown" },
};

export const ALARM_STATES = {
  pending: { word: "PENDING", icon: "question", cls: "unknown" },
  active: { word: "ACTIVE", icon: "cross", cls: "out-of-class" },
  acknowledged: { word: "ACKNOWLEDGED", icon: "triangle", cls: "alert" },
  cleared: { word: "CLEARED", icon: "check", cls: "in-class" },
};

export const LEVELS = {
  alert: { word: "ALERT", icon: "triangle", cls: "alert" },
  action: { word: "ACTION", icon: "diamond", cls: "action" },
};

// icon draws one of the state shapes as SVG in the current text colour.
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
  switch (kind) {
    case "check":
      add("circle", { cx: 10, cy: 10, r: 9, fill: "currentColor" });
      add("path", { d: "M5.5 10.5l3 3 6-7", class: "mk-s", "stroke-width": 2.4, "stroke-linecap": "round", "stroke-linejoin": "round" });
      break;
    case "triangle":
      add("path", { d: "M10 1.5L19 18H1z", fill: "currentColor" });
      add("path", { d: "M10 7v5.5", class: "mk-s", "stroke-width": 2.2, "stroke-linecap": "round" });
      add("circle", { cx: 10, cy: 15.2, r: 1.2, class: "mk-f" });
      break;
    case "diamond":
      add("path", { d: "M10 0.8L19.2 10 10 19.2 0.8 10z", fill: "currentColor" });
      add("path", { d: "M10 5.5v5.5", class: "mk-s", "stroke-width": 2.2, "stroke-linecap": "round" });
      add("circle", { cx: 10, cy: 14, r: 1.2, class: "mk-f" });
      break;
    case "cross":
      add("rect", { x: 1, y: 1, width: 18, height: 18, rx: 2, fill: "currentColor" });
      add("path", { d: "M6 6l8 8M14 6l-8 8", class: "mk-s", "stroke-width": 2.6, "stroke-linecap": "round" });
      break;
    default:
      add("circle", { cx: 10, cy: 10, r: 8.2, fill: "none", stroke: "currentColor", "stroke-width": 2, "stroke-dasharray": "3 2" });
      add("text", { x: 10, y: 14.5, "text-anchor": "middle", "font-size": 12, "font-weight": 700, fill: "currentColor" }).textContent = "?";
  }
  return svg;
}

// badge is the state as icon and word; cls picks the colour and border.
function badgeOf(def, cls, extra) {
  return el("span", { class: "badge st-" + cls + (extra ? " " + extra : "") }, icon(def.icon), el("span", { class: "word" }, def.word));
}

export function stateBadge(state, extra) {
  const def = STATES[state] || STATES.unknown;
  const b = badgeOf(def, STATES[state] ? state : "unknown", extra);
  b.dataset.state = STATES[state] ? state : "unknown";
  return b;
}

export function dpBadge(state, extra) {
  const def = DP_STATES[state] || DP_STATES.unknown;
  const b = badgeOf(def, def.cls, extra);
  b.dataset.state = state;
  return b;
}

export function alarmStateBadge(state) {
  const def = ALARM_STATES[state] || { word: String(state).toUpperCase(), icon: "question", cls: "unknown" };
  const b = badgeOf(def, def.cls);
  b.dataset.state = state;
  return b;
}

export function levelBadge(level) {
  const def = LEVELS[level] || { word: String(level).toUpperCase(), icon: "question", cls: "unknown" };
  return badgeOf(def, def.cls);
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

// Times are shown in the browser's local time, with the full UTC time as
// a tooltip: the wall screen shows the clock the room runs on.
export function timeText(iso, withDate) {
  if (!iso) return "—";
  const d = new Date(iso);
  const opts = { hour: "2-digit", minute: "2-digit", second: "2-digit", hour12: false };
  if (withDate) Object.assign(opts, { year: "numeric", month: "2-digit", day: "2-digit" });
  return d.toLocaleString(undefined, opts);
}

export function timeEl(iso, withDate) {
  return el("time", { datetime: iso || "", title: iso ? new Date(iso).toISOString() : "" }, timeText(iso, withDate));
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

export function init() {
  const page = document.body.dataset.page;
  for (const a of document.querySelectorAll("[data-nav]")) {
    if (a.dataset.nav === page) a.setAttribute("aria-current", "page");
  }
  fillLegendIcons();
  wireSignIn();
  return refreshSession();
}
