// Shared by every page: API calls with the session cookie and the page's CSRF
// token, one refresh of an expired session, and errors shown where they happened.
"use strict";
(function () {
  const csrf = () => document.querySelector('meta[name="csrf-token"]').content;
  let refreshing = null;

  async function refresh() {
    if (!refreshing) {
      refreshing = fetch("/session/refresh", { method: "POST", headers: { "X-CSRF-Token": csrf() }, credentials: "same-origin" })
        .finally(() => { setTimeout(() => { refreshing = null; }, 1000); });
    }
    const res = await refreshing;
    return res.ok;
  }

  // api sends a JSON request and answers {ok, status, body}; a 401 is retried once
  // after renewing the session.
  async function api(path, opts = {}, retried = false) {
    const headers = Object.assign({ "X-CSRF-Token": csrf() }, opts.headers || {});
    let body = opts.body;
    if (body !== undefined && typeof body !== "string") {
      body = JSON.stringify(body);
      headers["Content-Type"] = "application/json";
    }
    const res = await fetch(path, { method: opts.method || "GET", headers, body, credentials: "same-origin" });
    if (res.status === 401 && !retried && !path.startsWith("/signin") && await refresh()) return api(path, opts, true);
    let data = null;
    const type = res.headers.get("Content-Type") || "";
    if (res.status !== 204 && type.includes("json")) data = await res.json();
    return { ok: res.ok, status: res.status, body: data, headers: res.headers };
  }

  // showError fills el with the API error's message and one line per named field.
  function showError(el, body, fallback) {
    el.replaceChildren();
    const e = body && body.error;
    const p = document.createElement("p");
    p.textContent = e ? e.message : (fallback || "Something went wrong; try again.");
    el.append(p);
    if (e && e.fields) {
      const ul = document.createElement("ul");
      for (const [k, v] of Object.entries(e.fields)) {
        const li = document.createElement("li");
        const code = document.createElement("code");
        code.textContent = k;
        li.append(code, " " + v);
        ul.append(li);
      }
      el.append(ul);
    }
  }

  function el(tag, attrs, ...children) {
    const e = document.createElement(tag);
    for (const [k, v] of Object.entries(attrs || {})) {
      if (k === "class") e.className = v; else if (k === "text") e.textContent = v; else e.setAttribute(k, v);
    }
    e.append(...children);
    return e;
  }

  function bytes(n) {
    const u = ["B", "KiB", "MiB", "GiB", "TiB"];
    let i = 0;
    while (n >= 1024 && i < u.length - 1) { n /= 1024; i++; }
    return (i ? n.toFixed(1) : String(n)) + " " + u[i];
  }

  // when shows an instant as a wall time in the facility's zone (DST included).
  function when(iso, withDay = true) {
    const zone = document.querySelector('meta[name="facility-zone"]').content;
    const opts = { timeZone: zone, hour: "2-digit", minute: "2-digit", hourCycle: "h23" };
    if (withDay) Object.assign(opts, { weekday: "short", day: "numeric", month: "short" });
    return new Intl.DateTimeFormat("en-GB", opts).format(new Date(iso));
  }

  window.BL = { api, csrf, showError, el, bytes, when };
  document.addEventListener("htmx:configRequest", (ev) => { ev.detail.headers["X-CSRF-Token"] = csrf(); });

  // Sign-in and sign-out: the server keeps the session in cookies scripts cannot read.
  document.addEventListener("DOMContentLoaded", () => {
    const form = document.getElementById("sign-in-form");
    if (form) {
      form.addEventListener("submit", async (ev) => {
        ev.preventDefault();
        const f = new FormData(form);
        const r = await api("/signin", { method: "POST", body: { email: f.get("email"), password: f.get("password") } });
        if (r.ok) { location.assign("/"); return; }
        showError(document.getElementById("sign-in-error"), r.body);
      });
    }
    const out = document.getElementById("sign-out");
    if (out) {
      out.addEventListener("click", async () => {
        await api("/signout", { method: "POST" });
        location.assign("/signin");
      });
    }
  });
})();
