// Start page: sign in through the API, keep the tokens for this tab only, and show the
// signed-in user's projects and instruments.
"use strict";
const store = window.sessionStorage;

async function api(path, opts = {}) {
  const headers = { "Content-Type": "application/json" };
  const token = store.getItem("access_token");
  if (token) headers["Authorization"] = "Bearer " + token;
  const res = await fetch(path, { ...opts, headers });
  const body = res.status === 204 ? null : await res.json();
  if (!res.ok) throw new Error(body && body.error ? body.error.message : res.statusText);
  return body;
}

function text(tag, s) { const e = document.createElement(tag); e.textContent = s; return e; }

async function showOverview() {
  const me = await api("/api/v1/me");
  document.getElementById("greeting").textContent = me.display_name + " · " + me.role;
  const projects = await api("/api/v1/projects");
  const pl = document.getElementById("projects"); pl.replaceChildren();
  for (const p of projects.items) pl.append(text("li", p.code + " — " + p.title + " (" + p.rate_class + ")"));
  const instruments = await api("/api/v1/instruments");
  const il = document.getElementById("instruments"); il.replaceChildren();
  for (const i of instruments.items) il.append(text("li", i.code + " — " + i.name));
  document.getElementById("sign-in").hidden = true;
  document.getElementById("overview").hidden = false;
  document.getElementById("sign-out").hidden = false;
}

document.addEventListener("DOMContentLoaded", () => {
  document.getElementById("sign-in-form").addEventListener("submit", async (ev) => {
    ev.preventDefault();
    const f = new FormData(ev.target);
    try {
      const t = await api("/api/v1/auth/login", { method: "POST", body: JSON.stringify({ email: f.get("email"), password: f.get("password") }) });
      store.setItem("access_token", t.access_token);
      store.setItem("refresh_token", t.refresh_token);
      await showOverview();
    } catch (e) {
      document.getElementById("sign-in-error").textContent = e.message;
    }
  });
  document.getElementById("sign-out").addEventListener("click", async () => {
    const r = store.getItem("refresh_token");
    store.clear();
    if (r) { try { await api("/api/v1/auth/logout", { method: "POST", body: JSON.stringify({ refresh_token: r }) }); } catch (e) {} }
    location.reload();
  });
  if (store.getItem("access_token")) showOverview().catch(() => store.clear());
});
