// Certification: pick a zone and a period, see the verdict the API
// computes from the stored samples (the same as `cleanmon certify`),
// download the HTML report and the JSON. The address keeps zone, from and
// to, so a result can be bookmarked or sent.

import { init, get, request, download, explain, el, icon, num, targetText, timeEl, wallParts, fromWall, tzLabel, session, signatureText, reauthHref } from "./common.js";

const HOUR = 3600e3;
const PRESETS = { "24h": 24 * HOUR, "7d": 7 * 24 * HOUR, "30d": 30 * 24 * HOUR };

let shown = null; // { zone, from, to, text }

function setMsg(id, text, kind) {
  const m = document.getElementById(id);
  m.textContent = text;
  m.className = "msg" + (kind ? " " + kind : "");
}

// localValue writes a time for a datetime-local input, on the site's
// clock (the input has no zone of its own; the note beside it names it).
function localValue(ms) {
  const w = wallParts(ms);
  const p = (n) => String(n).padStart(2, "0");
  return w.y + "-" + p(w.mo) + "-" + p(w.d) + "T" + p(w.h) + ":" + p(w.mi) + ":" + p(w.s);
}

function preset(span) {
  const to = Math.ceil(Date.now() / 1000) * 1000;
  document.getElementById("cert-from").value = localValue(to - span);
  document.getElementById("cert-to").value = localValue(to);
}

// isoOf reads an input's site-clock time as an instant.
function isoOf(id) {
  const m = /^(\d{4})-(\d{2})-(\d{2})T(\d{2}):(\d{2})(?::(\d{2}))?/.exec(document.getElementById(id).value);
  if (!m) return "";
  const t = fromWall(+m[1], +m[2], +m[3], +m[4], +m[5], +(m[6] || 0));
  return new Date(t).toISOString().replace(".000Z", "Z");
}

function result(l, size) {
  const p = l.pass_by_size ? l.pass_by_size[size] : null;
  if (p === null || p === undefined) return el("span", {}, "not judged");
  return p
    ? el("span", { class: "badge st-in-class" }, icon("gauge-0"), el("span", { class: "word" }, "WITHIN"))
    : el("span", { class: "badge st-out-of-class" }, icon("gauge-4"), el("span", { class: "word" }, "OVER LIMIT"));
}

function show(rep) {
  const pass = rep.verdict === "pass";
  const v = document.getElementById("verdict");
  v.className = "verdict " + (pass ? "pass" : "fail");
  v.dataset.verdict = rep.verdict;
  v.replaceChildren(icon(pass ? "gauge-0" : "gauge-4"), el("span", { class: "word" }, pass ? "PASS" : "FAIL"));

  const dd = (k, ...v) => [el("dt", {}, k), el("dd", {}, ...v)];
  const locs = rep.locations || [];
  document.getElementById("cert-summary").replaceChildren(
    ...dd("Target", targetText(rep), " · ", rep.state, " · ISO 14644-1:" + rep.edition),
    ...dd("Area", String(rep.area_m2) + " m²"),
    ...dd("Locations", locs.length + " sampled, " + rep.required_locations + " required"),
    ...dd("Single sample volume", (rep.plan && rep.plan.sample_volume_l ? rep.plan.sample_volume_l.toFixed(2) : "—") + " L at least"),
    ...dd("Sampled", rep.samples_from ? [timeEl(rep.samples_from, true), " – ", timeEl(rep.samples_to, true)] : "—"),
    ...dd("Achieved class", rep.achieved_class != null ? "ISO " + rep.achieved_class : "none (above ISO 9)"),
  );
  const probs = rep.problems || [];
  document.getElementById("cert-problems").replaceChildren(...(probs.length ? probs.map((p) => el("li", {}, p)) : [el("li", { class: "muted" }, "No problems found.")]));
  document.getElementById("cert-problems").dataset.count = probs.length;
  document.getElementById("cert-warnings").replaceChildren(...(rep.warnings || []).map((w) => el("li", {}, "Note: " + w)));

  const sizes = rep.sizes_um || [];
  document.getElementById("cert-locations").replaceChildren(el("table", {},
    el("thead", {}, el("tr", {},
      el("th", {}, "Location"), el("th", { class: "n" }, "Samples"), el("th", { class: "n" }, "Volume L"),
      el("th", {}, "Size"), el("th", { class: "n" }, "Limit /m³"), el("th", { class: "n" }, "Mean /m³"), el("th", { class: "n" }, "95 % upper /m³"), el("th", {}, "Result"))),
    el("tbody", {}, locs.flatMap((l) => sizes.map((s, i) => el("tr", { dataset: { location: l.id, size: s } },
      i === 0 ? [el("td", { rowspan: sizes.length }, l.id), el("td", { class: "n", rowspan: sizes.length }, l.samples), el("td", { class: "n", rowspan: sizes.length }, l.volume_l.toFixed(1))] : "",
      el("td", {}, "≥" + s + " µm"),
      el("td", { class: "n" }, rep.limits_per_m3[s] == null ? "no limit" : num(rep.limits_per_m3[s])),
      el("td", { class: "n mean" }, num(l.mean_per_m3[s])),
      el("td", { class: "n" }, l.poisson_upper95_per_m3 ? num(l.poisson_upper95_per_m3[s]) : "—"),
      el("td", {}, result(l, s)),
    )))),
  ));
  document.getElementById("cert-result").hidden = false;
}

async function evaluate() {
  const zone = document.getElementById("cert-zone").value;
  const from = isoOf("cert-from");
  const to = isoOf("cert-to");
  if (!zone || !from || !to) {
    setMsg("cert-msg", "Pick a zone and a period.", "error");
    return;
  }
  const u = new URL(location.href);
  u.search = new URLSearchParams({ zone, from, to }).toString();
  history.replaceState(null, "", u);
  setMsg("cert-msg", "Evaluating…");
  document.getElementById("cert-result").hidden = true;
  document.body.dataset.certReady = "no";
  try {
    const q = new URLSearchParams({ from, to });
    const text = await request("GET", "/api/v1/zones/" + encodeURIComponent(zone) + "/classification?" + q.toString(), undefined, { raw: true });
    const rep = JSON.parse(text);
    shown = { zone, from, to, text };
    show(rep);
    await showSignatures();
    setMsg("cert-msg", "");
  } catch (e) {
    shown = null;
    setMsg("cert-msg", explain(e, "Certifying " + zone), "error");
  }
  document.body.dataset.certReady = "yes";
}

function listSignatures(sigs) {
  const ul = document.getElementById("sig-list");
  ul.replaceChildren(...(sigs.length ? sigs.map((sig) => el("li", { dataset: { meaning: sig.meaning, user: sig.user } },
    signatureText(sig), sig.matches ? "" : " — NOT of this report as it reads now")) : [el("li", { class: "muted" }, "Not signed yet.")]));
}

// showSignatures lists the report's signatures and offers the meanings
// the signed-in person may give.
async function showSignatures() {
  const q = new URLSearchParams({ zone: shown.zone, from: shown.from, to: shown.to });
  listSignatures(await get("/certify/report/signatures?" + q.toString()));
  const s = session();
  const form = document.getElementById("sign-form");
  form.hidden = !(s && s.person && s.may_sign && s.may_sign.length);
  if (!form.hidden) {
    document.getElementById("sign-meaning").replaceChildren(...s.may_sign.map((m) => el("option", { value: m }, m)));
    document.getElementById("sign-password-box").hidden = s.method === "oidc";
  }
}

async function sign() {
  if (!shown) return;
  const s = session();
  setMsg("sign-msg", "Signing…");
  try {
    const sigs = await request("POST", "/certify/report/sign", {
      zone: shown.zone, from: shown.from, to: shown.to,
      meaning: document.getElementById("sign-meaning").value,
      password: document.getElementById("sign-password").value,
    });
    listSignatures(sigs);
    setMsg("sign-msg", "Signed.", "ok");
  } catch (e) {
    setMsg("sign-msg", explain(e, "Signing"), "error");
    if (e.status === 401 && s && s.method === "oidc") {
      document.getElementById("sign-msg").append(" ", el("a", { href: reauthHref(), id: "reauth-link" }, "Sign in at the provider again"));
    }
  } finally {
    document.getElementById("sign-password").value = "";
  }
}

async function loadZones() {
  const zones = await get("/api/v1/zones");
  const sel = document.getElementById("cert-zone");
  const classified = zones.filter((z) => (z.class !== null && z.class !== undefined) || z.grade);
  sel.replaceChildren(...classified.map((z) => el("option", { value: z.id }, (z.name || z.id) + " — " + targetText(z))));
}

function wire() {
  for (const b of document.querySelectorAll("[data-preset]")) b.addEventListener("click", () => preset(PRESETS[b.dataset.preset]));
  document.getElementById("cert-form").addEventListener("submit", (ev) => {
    ev.preventDefault();
    evaluate();
  });
  document.getElementById("sign-form").addEventListener("submit", (ev) => {
    ev.preventDefault();
    sign();
  });
  document.getElementById("dl-html").addEventListener("click", async () => {
    if (!shown) return;
    setMsg("dl-msg", "Preparing the report…");
    try {
      const q = new URLSearchParams({ zone: shown.zone, from: shown.from, to: shown.to });
      const n = await download("/certify/report?" + q.toString(), "certification-" + shown.zone + ".html");
      setMsg("dl-msg", "Report downloaded (" + Math.round(n / 1024) + " KiB).", "ok");
    } catch (e) {
      setMsg("dl-msg", explain(e, "Downloading the report"), "error");
    }
  });
  document.getElementById("dl-json").addEventListener("click", () => {
    if (!shown) return;
    // The very answer shown, byte for byte: the report names its SHA-256.
    const a = el("a", { href: URL.createObjectURL(new Blob([shown.text], { type: "application/json" })), download: "certification-" + shown.zone + ".json" });
    document.body.append(a);
    a.click();
    a.remove();
    setMsg("dl-msg", "JSON downloaded.", "ok");
  });
}

init().then(async () => {
  wire();
  document.getElementById("tz-note").textContent = "Times are on the site's clock (" + tzLabel() + ").";
  try {
    await loadZones();
  } catch (e) {
    setMsg("cert-msg", explain(e, "Loading the zones"), "error");
    return;
  }
  const p = new URLSearchParams(location.search);
  preset(PRESETS["24h"]);
  if (p.get("zone")) document.getElementById("cert-zone").value = p.get("zone");
  const f = Date.parse(p.get("from") || "");
  const t = Date.parse(p.get("to") || "");
  if (Number.isFinite(f) && Number.isFinite(t)) {
    document.getElementById("cert-from").value = localValue(f);
    document.getElementById("cert-to").value = localValue(t);
    evaluate();
  }
  document.body.dataset.ready = "yes";
});
