// The zone page's production runs: the last 30 days' runs with their
// alarm count, a run started or closed here (operator role), and the link
// to the month on one page.

import { get, request, el, timeEl, explain, poll } from "./common.js";

const zoneID = decodeURIComponent(location.pathname.split("/")[2] || "");

function setMsg(text, kind) {
  const m = document.getElementById("run-form-msg");
  m.textContent = text;
  m.className = "msg" + (kind ? " " + kind : "");
}

async function refresh() {
  const from = new Date(Date.now() - 30 * 86400e3).toISOString();
  const runs = await get("/api/v1/runs?zone=" + encodeURIComponent(zoneID) + "&from=" + encodeURIComponent(from));
  const box = document.getElementById("zone-runs");
  if (!runs.length) {
    box.replaceChildren(el("p", { class: "muted" }, "No production run recorded in the last 30 days."));
    return;
  }
  runs.reverse();
  box.replaceChildren(el("table", { class: "run-table" },
    el("thead", {}, el("tr", {}, ["Run", "Product", "Lot", "Start", "End", "Recorded by", ""].map((h) => el("th", {}, h)))),
    el("tbody", {}, runs.slice(0, 20).map((r) => el("tr", { dataset: { runId: r.id } },
      el("td", {}, el("a", { href: "/runs/" + encodeURIComponent(r.id) }, r.id)),
      el("td", {}, r.product || "—"),
      el("td", {}, r.lot || "—"),
      el("td", {}, timeEl(r.start, true)),
      el("td", {}, r.end ? timeEl(r.end, true) : "open"),
      el("td", {}, r.recorded_by),
      el("td", {}, r.open ? el("button", { type: "button", onclick: () => closeRun(r.id) }, "Close now") : el("a", { href: "/runs/" + encodeURIComponent(r.id) }, "Exposure")),
    )))));
}

async function closeRun(id) {
  try {
    await request("POST", "/api/v1/runs/" + encodeURIComponent(id) + "/close", {});
    setMsg("Run " + id + " closed.", "ok");
    refresh();
  } catch (e) {
    setMsg(explain(e, "Closing the run"), "error");
  }
}

// startRuns wires the section; the zone page calls it once signed in.
export function startRuns() {
  document.getElementById("zone-trend").href = "/zones/" + encodeURIComponent(zoneID) + "/trend";
  document.getElementById("run-form").addEventListener("submit", async (ev) => {
    ev.preventDefault();
    const body = {
      id: document.getElementById("run-new-id").value.trim(),
      zone: zoneID,
      start: new Date().toISOString(),
      product: document.getElementById("run-new-product").value.trim(),
      lot: document.getElementById("run-new-lot").value.trim(),
    };
    try {
      await request("POST", "/api/v1/runs", body);
      setMsg("Run " + body.id + " started.", "ok");
      document.getElementById("run-new-id").value = "";
      refresh();
    } catch (e) {
      setMsg(explain(e, "Recording the run"), "error");
    }
  });
  poll(refresh, 15000);
}
