// Accounts (admin): list, add, disable, enable, unlock, reset, role. A new
// or reset password is shown once, here, and kept nowhere.

import { init, get, request, explain, el, timeEl } from "./common.js";

function setMsg(id, text, kind) {
  const m = document.getElementById(id);
  m.textContent = text;
  m.className = "msg" + (kind ? " " + kind : "");
}

function showPassword(name, pw) {
  const p = document.getElementById("acc-password");
  p.hidden = !pw;
  p.replaceChildren(...(pw ? ["Password of ", el("strong", {}, name), " (shown once, give it to the person): ", el("code", { id: "new-password" }, pw)] : []));
}

// pending is the change waiting for its reason in the confirmation form.
let pending = null;

// ask shows the confirmation form for a change of an existing account: it
// names the change and takes the reason the audit trail keeps with it.
function ask(op, a, extra) {
  pending = { op, a, extra };
  const what = { disable: "Disable", enable: "Enable", unlock: "Unlock", reset: "Reset the password of", role: "Change the role of" }[op] || op;
  document.getElementById("acc-confirm-what").replaceChildren(what + " ", el("strong", {}, a.name),
    op === "role" ? " to " + extra.role : "", a.full_name ? " (" + a.full_name + ")" : "", "?");
  const form = document.getElementById("acc-confirm");
  form.hidden = false;
  form.dataset.op = op;
  form.dataset.name = a.name;
  const reason = document.getElementById("acc-reason");
  reason.value = "";
  reason.focus();
}

function closeConfirm() {
  pending = null;
  document.getElementById("acc-confirm").hidden = true;
}

async function change(op, a, extra, reason) {
  try {
    const r = await request("POST", "/ui/accounts", { op, name: a.name, full_name: a.full_name || "", role: (extra && extra.role) || "", reason });
    setMsg("acc-msg", op + " of " + a.name + ": done.", "ok");
    showPassword(a.name, r.password);
    await refresh();
  } catch (e) {
    setMsg("acc-msg", explain(e, op + " of " + a.name), "error");
  }
}

function row(a) {
  const role = el("select", { "aria-label": "Role of " + a.name, disabled: !!a.provider },
    ["viewer", "operator", "qa", "admin"].map((r) => el("option", { selected: r === a.role }, r)));
  role.addEventListener("change", () => ask("role", a, { role: role.value }));
  const btn = (op, label, show) => show ? el("button", { type: "button", dataset: { op, name: a.name }, onclick: () => ask(op, a) }, label) : "";
  return el("tr", { dataset: { name: a.name } },
    el("td", {}, a.name), el("td", {}, a.full_name), el("td", {}, role),
    el("td", {}, [a.disabled ? "disabled" : "enabled", a.locked ? ", locked" : "", a.failed_sign_ins ? " (" + a.failed_sign_ins + " failed)" : ""]),
    el("td", {}, a.provider || "local"),
    el("td", {}, timeEl(a.changed, true)),
    el("td", {}, btn("disable", "Disable", !a.disabled), btn("enable", "Enable", a.disabled), btn("unlock", "Unlock", a.locked), btn("reset", "Reset password", !a.provider)));
}

async function refresh() {
  const list = await get("/ui/accounts");
  document.getElementById("acc-list").replaceChildren(el("table", { class: "acc-table" },
    el("thead", {}, el("tr", {}, ["Name", "Full name", "Role", "State", "Sign-in", "Changed", ""].map((h) => el("th", {}, h)))),
    el("tbody", {}, list.map(row))));
  document.body.dataset.ready = "yes";
}

init().then(async () => {
  document.getElementById("acc-form").addEventListener("submit", async (ev) => {
    ev.preventDefault();
    const a = { name: document.getElementById("acc-name").value.trim(), full_name: document.getElementById("acc-full").value.trim() };
    await change("add", a, { role: document.getElementById("acc-role").value }, "");
  });
  document.getElementById("acc-confirm").addEventListener("submit", async (ev) => {
    ev.preventDefault();
    if (!pending) return;
    const { op, a, extra } = pending;
    const reason = document.getElementById("acc-reason").value.trim();
    closeConfirm();
    await change(op, a, extra, reason);
  });
  document.getElementById("acc-confirm-cancel").addEventListener("click", async () => {
    const wasRole = pending && pending.op === "role";
    closeConfirm();
    if (wasRole) await refresh(); // put the role selector back
  });
  try {
    await refresh();
  } catch (e) {
    setMsg("acc-msg", explain(e, "Listing the accounts"), "error");
  }
});
