// Audit trail: the chain's head and check at the top, then the entries
// that pass the filters (who, action, zone, period), readable, with a CSV
// export of exactly what is shown.

import { init, get, download, explain, el, timeEl } from "./common.js";

function setMsg(text, kind) {
  const m = document.getElementById("audit-msg");
  m.textContent = text;
  m.className = "msg" + (kind ? " " + kind : "");
}

function localValue(ms) {
  const d = new Date(ms - new Date(ms).getTimezoneOffset() * 60000);
  return d.toISOString().slice(0, 19);
}

function query(format) {
  const q = new URLSearchParams();
  for (const [k, id] of [["who", "f-who"], ["action", "f-action"], ["zone", "f-zone"]]) {
    const v = document.getElementById(id).value.trim();
    if (v) q.set(k, v);
  }
  for (const [k, id] of [["from", "f-from"], ["to", "f-to"]]) {
    const v = document.getElementById(id).value;
    if (v) q.set(k, new Date(v).toISOString());
  }
  if (format) q.set("format", format);
  return q;
}

async function chain() {
  const s = await get("/ui/audit/status");
  const box = document.getElementById("chain");
  box.dataset.verified = s.verified ? "yes" : "no";
  box.replaceChildren(
    el("p", { class: s.verified ? "st-in-class" : "st-out-of-class", id: "chain-state" },
      s.verified ? "Chain checked: no fault found (" + s.check + ")." : "CHAIN FAULT: " + (s.problems || []).join("; ")),
    el("p", {}, "Head: entry #" + s.seq + ", hash ", el("code", { id: "chain-head" }, s.hash), ", checked ", timeEl(s.checked_at, true)),
    s.command ? el("p", {}, "Full check: ", el("code", {}, s.command)) : "");
}

async function show() {
  setMsg("Loading…");
  const rows = await get("/api/v1/audit?" + query().toString());
  document.getElementById("audit-list").replaceChildren(el("table", { class: "audit-table" },
    el("thead", {}, el("tr", {}, ["#", "Time", "Who", "Action", "Subject", "Reason", "Detail"].map((h) => el("th", {}, h)))),
    el("tbody", {}, rows.map((e) => el("tr", { dataset: { seq: e.seq, action: e.action } },
      el("td", {}, String(e.seq)), el("td", {}, timeEl(e.time, true)), el("td", {}, e.actor), el("td", {}, e.action),
      el("td", {}, e.subject), el("td", {}, e.reason), el("td", {}, el("pre", { class: "detail" }, e.detail || "")))))));
  setMsg(rows.length + " entries.", "ok");
  document.body.dataset.ready = "yes";
}

init().then(async () => {
  document.getElementById("f-from").value = localValue(Date.now() - 24 * 3600 * 1000);
  document.getElementById("f-to").value = localValue(Date.now() + 3600 * 1000);
  try {
    const site = await get("/ui/site");
    for (const z of (site.areas || []).filter((a) => a.zone)) document.getElementById("f-zone").append(el("option", { value: z.id }, z.id));
  } catch {
    // the zone filter stays "any"
  }
  document.getElementById("audit-form").addEventListener("submit", (ev) => {
    ev.preventDefault();
    show().catch((e) => setMsg(explain(e, "Reading the audit trail"), "error"));
  });
  document.getElementById("f-csv").addEventListener("click", () => {
    download("/api/v1/audit?" + query("csv").toString(), "audit.csv").catch((e) => setMsg(explain(e, "Exporting"), "error"));
  });
  chain().catch((e) => {
    document.getElementById("chain").replaceChildren(el("p", { class: "st-unknown" }, "Chain state UNKNOWN: " + explain(e, "Checking the chain")));
  });
  show().catch((e) => setMsg(explain(e, "Reading the audit trail"), "error"));
});
