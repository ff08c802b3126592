// Alarms: the open ones (active, acknowledged) or the last 7
// days, refreshed every 2 s; an active alarm is acknowledged with a
// comment (operator role). The acknowledgement form sits outside the
// refreshed list, so a refresh never eats what the operator is typing.

import {
  init, get, request, poll, banner, explain, el, alarmStateBadge, levelBadge, num, timeEl, session, onSession, signatureText, reauthHref,
} from "./common.js";

let view = new URLSearchParams(location.search).get("view") === "all" ? "all" : "active";
let acking = null; // the alarm in the acknowledgement form
let list = null;

function setMsg(id, text, kind) {
  const m = document.getElementById(id);
  m.textContent = text;
  m.className = "msg" + (kind ? " " + kind : "");
}

// pathSegment escapes an alarm id for the path but keeps its colons
// (zone:location:size:kind:time), which a path segment may hold and the
// API matches literally.
function pathSegment(id) {
  return encodeURIComponent(id).replace(/%3A/gi, ":");
}

function where(a) {
  return [a.location, a.counter && a.counter !== a.location ? a.counter : "", a.size_um ? "≥" + a.size_um + " µm" : "", a.sensor].filter(Boolean).join(" · ") || "—";
}

function value(a) {
  if (a.unit === undefined || a.unit === "") return num(a.value);
  const fmt = a.unit === "Pa" ? (v) => v.toFixed(1) : num;
  return fmt(a.value) + " " + a.unit + " (threshold " + fmt(a.threshold) + ")";
}

function peak(a) {
  const fmt = a.unit === "Pa" ? (v) => v.toFixed(1) : num;
  return fmt(a.peak) + (a.unit ? " " + a.unit : "");
}

function openAck(a) {
  acking = a;
  document.getElementById("ack-what").replaceChildren(
    levelBadge(a.level), " ", a.kind + " in " + a.zone + " (" + where(a) + "), since ", timeEl(a.since, true), ": " + a.message);
  document.getElementById("ack-panel").hidden = false;
  document.getElementById("ack-panel").dataset.alarmId = a.id;
  setMsg("ack-msg", "");
  const s = session();
  if (s && !s.may_operate) {
    setMsg("ack-msg", s.signed_in
      ? "Your token (" + s.name + ", role " + s.role + ") may not acknowledge: it needs the operator role."
      : "Sign in with an operator token to acknowledge.", "error");
  }
  const person = !!(s && s.person);
  document.getElementById("ack-sign").hidden = !person;
  document.getElementById("ack-by").parentElement.hidden = person;
  if (person) {
    document.getElementById("ack-signer").textContent = s.full_name + " (" + s.name + ")";
    document.getElementById("ack-password-box").hidden = s.method === "oidc";
  }
  document.getElementById("ack-comment").focus();
  render();
}

function closeAck() {
  acking = null;
  document.getElementById("ack-panel").hidden = true;
  render();
}

function render() {
  if (!list) return;
  const box = document.getElementById("alarm-list");
  if (!list.length) {
    box.replaceChildren(el("p", { class: "muted" }, view === "active" ? "No alarm open." : "No alarm in the last 7 days."));
    return;
  }
  const td = (label, cls, ...c) => el("td", { class: cls, dataset: { label } }, ...c);
  box.replaceChildren(el("table", { class: "alarm-table" },
    el("thead", {}, el("tr", {}, ["State", "Level", "Zone", "Kind", "Where", "Since", "Value", "Peak", "Message", "Acknowledged", ""].map((h) => el("th", {}, h)))),
    el("tbody", {}, list.map((a) => el("tr", { class: acking && acking.id === a.id ? "ack-open" : "", dataset: { alarmId: a.id, state: a.state } },
      td("State", "", alarmStateBadge(a.state), a.latched && a.condition_gone && a.state !== "cleared" ? el("div", { class: "muted" }, "condition gone, latched") : ""),
      td("Level", "", levelBadge(a.level)),
      td("Zone", "", el("a", { href: "/zones/" + encodeURIComponent(a.zone) }, a.zone)),
      td("Kind", "", a.kind),
      td("Where", "", where(a)),
      td("Since", "", timeEl(a.since, true)),
      td("Value", "", value(a)),
      td("Peak", "", typeof a.peak === "number" && a.peak_time ? [peak(a), " at ", timeEl(a.peak_time, true)] : "—"),
      td("Message", "wide", a.message),
      td("Acknowledged", "acked", a.acknowledged_by ? [a.acknowledged_by, a.acknowledged_at ? [" ", timeEl(a.acknowledged_at, true)] : "", a.comment ? [el("br"), "“" + a.comment + "”"] : ""] : "—",
        (a.signatures || []).map((sig) => el("div", { class: "signature" }, "Signed: " + signatureText(sig)))),
      td("", "act", a.state === "active"
        ? el("button", { type: "button", class: "ack-btn", onclick: () => openAck(a) }, "Acknowledge")
        : "", " ", el("a", { class: "investigate", href: "/alarms/" + pathSegment(a.id) + "/investigation" }, "Investigate")),
    )))));
}

async function refresh() {
  list = await get("/api/v1/alarms?state=" + view);
  render();
  banner(null);
  document.body.dataset.ready = "yes";
}

function wire(p) {
  for (const b of document.querySelectorAll("[data-view]")) {
    b.setAttribute("aria-pressed", String(b.dataset.view === view));
    b.addEventListener("click", () => {
      view = b.dataset.view;
      for (const c of document.querySelectorAll("[data-view]")) c.setAttribute("aria-pressed", String(c.dataset.view === view));
      const u = new URL(location.href);
      u.searchParams.set("view", view);
      history.replaceState(null, "", u);
      p.now();
    });
  }
  document.getElementById("ack-cancel").addEventListener("click", closeAck);
  document.getElementById("ack-form").addEventListener("submit", async (ev) => {
    ev.preventDefault();
    if (!acking) return;
    const btn = document.getElementById("ack-submit");
    btn.disabled = true;
    setMsg("ack-msg", "Sending…");
    try {
      const body = { comment: document.getElementById("ack-comment").value.trim() };
      const s = session();
      if (s && s.person) {
        body.signature = { meaning: "acknowledged", password: document.getElementById("ack-password").value };
      } else {
        body.by = document.getElementById("ack-by").value.trim();
      }
      document.getElementById("ack-password").value = "";
      let a;
      try {
        a = await request("POST", "/api/v1/alarms/" + pathSegment(acking.id) + "/ack", body);
      } catch (e) {
        if (e.status === 401 && s && s.method === "oidc") {
          setMsg("ack-msg", explain(e, "Signing"), "error");
          document.getElementById("ack-msg").append(" ", el("a", { href: reauthHref(), id: "reauth-link" }, "Sign in at the provider again"));
          return;
        }
        throw e;
      }
      document.getElementById("ack-comment").value = "";
      acking = null;
      document.getElementById("ack-panel").hidden = true;
      setMsg("alarms-msg", "Acknowledged by " + a.acknowledged_by + ": the alarm is now " + a.state + ".", "ok");
      p.now();
    } catch (e) {
      setMsg("ack-msg", explain(e, "Acknowledging"), "error");
    } finally {
      btn.disabled = false;
    }
  });
}

init().then(() => {
  const p = poll(refresh, 2000);
  wire(p);
  onSession(() => {
    if (acking) openAck(acking);
  });
});
