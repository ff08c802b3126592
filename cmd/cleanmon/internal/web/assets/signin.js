// Sign in: a plain form post to the daemon, carrying the CSRF token of
// the pre-sign-in session (fetched here, since the page itself is a
// static file) and where to go next. A refusal comes back as ?error=.

import { init, get, explain } from "./common.js";

async function main() {
  await init();
  const q = new URLSearchParams(location.search);
  const err = q.get("error");
  if (err) {
    const m = document.getElementById("signin-error");
    m.textContent = "Not signed in: " + err + ".";
    m.hidden = false;
  }
  const next = q.get("next") || "/";
  document.getElementById("signin-next").value = next;
  try {
    const f = await get("/auth/form");
    document.getElementById("signin-csrf").value = f.csrf;
    if (f.oidc) {
      document.getElementById("oidc-box").hidden = false;
      document.getElementById("oidc-link").href = "/auth/oidc/start?next=" + encodeURIComponent(next);
    }
  } catch (e) {
    const m = document.getElementById("signin-error");
    m.textContent = explain(e, "Preparing the sign-in");
    m.hidden = false;
  }
  document.body.dataset.ready = "yes";
}

main();
