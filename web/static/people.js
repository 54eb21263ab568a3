// People and projects: everyone on the page reads the people and projects; managers
// add people and projects and change members. Staff and managers see an instrument's
// agent tokens; managers issue them (the secret shown once) and revoke them.
"use strict";
(function () {
  const $ = (s) => document.querySelector(s);
  const manage = () => !!$("#project-form");
  let people = new Map();

  const name = (id) => (people.get(id) || { display_name: "someone no longer listed" }).display_name;

  async function loadPeople() {
    const r = await BL.api("/api/v1/users");
    if (!r.ok) { BL.showError($("#people-error"), r.body); return false; }
    const us = r.body.items.slice().sort((a, b) => a.display_name.localeCompare(b.display_name));
    people = new Map(us.map((u) => [u.id, u]));
    $("#people-list tbody").replaceChildren(...us.map((u) => BL.el("tr", { "data-email": u.email },
      BL.el("td", { text: u.display_name + (u.disabled ? " (disabled)" : "") }), BL.el("td", { text: u.email }),
      BL.el("td", {}, BL.el("span", { class: "role role-" + u.role, text: u.role })))));
    const pi = $("#p-pi");
    if (pi) {
      const keep = pi.value;
      pi.replaceChildren(...us.filter((u) => !u.disabled && u.role !== "auditor").map((u) => BL.el("option", { value: u.id, text: u.display_name + " (" + u.email + ")" })));
      if (keep) pi.value = keep;
    }
    return true;
  }

  async function changeMember(p, userID, method) {
    const r = await BL.api("/api/v1/projects/" + p.id + "/members/" + userID, { method });
    if (!r.ok) { BL.showError($("#project-error"), r.body); $("#project-ok").textContent = ""; return; }
    $("#project-error").replaceChildren();
    await loadProjects();
    $("#project-ok").textContent = (method === "PUT" ? "Added " + name(userID) + " to " : "Removed " + name(userID) + " from ") + p.code + ".";
  }

  function membersCell(p) {
    const ids = [p.principal_investigator_id, ...(p.member_ids || []).filter((id) => id !== p.principal_investigator_id)];
    const list = BL.el("ul", { class: "plain members" }, ...ids.map((id) => {
      const li = BL.el("li", { "data-user": id, text: name(id) + (id === p.principal_investigator_id ? " (PI)" : "") });
      if (manage() && id !== p.principal_investigator_id) {
        const b = BL.el("button", { type: "button", class: "quiet small", "aria-label": "Remove " + name(id) + " from " + p.code, text: "Remove" });
        b.addEventListener("click", () => changeMember(p, id, "DELETE"));
        li.append(" ", b);
      }
      return li;
    }));
    const td = BL.el("td", {}, list);
    if (manage()) {
      const sel = BL.el("select", { class: "add-member", "aria-label": "Person to add to " + p.code },
        ...Array.from(people.values()).filter((u) => !u.disabled && u.role !== "auditor" && !ids.includes(u.id))
          .map((u) => BL.el("option", { value: u.id, text: u.display_name })));
      const add = BL.el("button", { type: "button", class: "quiet small", text: "Add member" });
      add.addEventListener("click", () => { if (sel.value) changeMember(p, sel.value, "PUT"); });
      if (sel.options.length) td.append(BL.el("div", { class: "cal-pick" }, sel, add));
    }
    return td;
  }

  async function loadProjects() {
    const r = await BL.api("/api/v1/projects");
    if (!r.ok) { BL.showError($("#project-error"), r.body); return; }
    const ps = r.body.items.slice().sort((a, b) => a.code.localeCompare(b.code));
    $("#project-list tbody").replaceChildren(...ps.map((p) => BL.el("tr", { "data-code": p.code },
      BL.el("th", { scope: "row", text: p.code }), BL.el("td", { text: p.title }), BL.el("td", { text: name(p.principal_investigator_id) }),
      BL.el("td", { text: p.rate_class.replace("_", " ") }), membersCell(p))));
  }

  const day = (iso) => (iso ? BL.when(iso) : "—");

  async function loadTokens() {
    const id = $("#t-instrument").value;
    if (!id) return;
    const r = await BL.api("/api/v1/instruments/" + id + "/agent-tokens");
    const tb = $("#token-list tbody");
    if (!r.ok) { BL.showError($("#t-list-error"), r.body); return; }
    const now = Date.now();
    tb.replaceChildren(...r.body.items.map((t) => {
      const state = t.revoked_at ? "revoked " + BL.when(t.revoked_at) : t.expires_at && Date.parse(t.expires_at) <= now ? "expired" : "active";
      const cell = BL.el("td", { class: "state" }, BL.el("span", { class: "status " + (state === "active" ? "status-open" : "status-closed"), text: state }));
      if (manage() && state === "active") {
        const b = BL.el("button", { type: "button", class: "danger small", text: "Revoke" });
        b.addEventListener("click", async () => {
          const res = await BL.api("/api/v1/instruments/" + id + "/agent-tokens/" + t.id, { method: "DELETE" });
          if (!res.ok) { BL.showError($("#t-list-error"), res.body); return; }
          $("#t-list-error").replaceChildren();
          await loadTokens();
          $("#t-list-ok").textContent = "Revoked " + t.name + "; the instrument computer holding it is refused from now on.";
        });
        cell.append(" ", b);
      }
      return BL.el("tr", { "data-name": t.name }, BL.el("td", { text: t.name }), BL.el("td", { text: t.scopes.join(", ") }),
        BL.el("td", { text: day(t.created_at) }), BL.el("td", { text: t.expires_at ? day(t.expires_at) : "never" }), BL.el("td", { text: day(t.last_used_at) }), cell);
    }));
    if (!r.body.items.length) tb.replaceChildren(BL.el("tr", {}, BL.el("td", { colspan: "6", class: "empty", text: "No tokens for this instrument." })));
  }

  function ok(el, text) { el.textContent = text; }

  document.addEventListener("DOMContentLoaded", async () => {
    if (await loadPeople()) await loadProjects();
    if ($("#t-instrument")) {
      $("#t-instrument").addEventListener("change", () => { $("#t-secret").hidden = true; loadTokens(); });
      loadTokens();
    }
    if (!manage()) return;
    $("#user-form").addEventListener("submit", async (ev) => {
      ev.preventDefault();
      const f = ev.target.elements;
      const r = await BL.api("/api/v1/users", { method: "POST", body: { display_name: f.display_name.value, email: f.email.value, role: f.role.value, password: f.password.value } });
      if (!r.ok) { BL.showError($("#u-error"), r.body); ok($("#u-ok"), ""); return; }
      $("#u-error").replaceChildren();
      ev.target.reset();
      await loadPeople();
      await loadProjects();
      ok($("#u-ok"), "Added " + r.body.display_name + " as " + r.body.role + ".");
    });
    $("#project-form").addEventListener("submit", async (ev) => {
      ev.preventDefault();
      const f = ev.target.elements;
      const r = await BL.api("/api/v1/projects", { method: "POST", body: { code: f.code.value, title: f.title.value,
        principal_investigator_id: f.principal_investigator_id.value, rate_class: f.rate_class.value } });
      if (!r.ok) { BL.showError($("#p-error"), r.body); ok($("#p-ok"), ""); return; }
      $("#p-error").replaceChildren();
      ev.target.reset();
      await loadProjects();
      ok($("#p-ok"), "Added " + r.body.code + ".");
    });
    const tf = $("#token-form");
    if (tf) tf.addEventListener("submit", async (ev) => {
      ev.preventDefault();
      const f = tf.elements;
      const body = { name: f.name.value, scopes: Array.from(tf.querySelectorAll('input[name="scopes"]:checked')).map((i) => i.value) };
      if (f.expires.value) body.expires_at = new Date(f.expires.value + "T23:59:59").toISOString();
      $("#t-secret").hidden = true;
      const r = await BL.api("/api/v1/instruments/" + $("#t-instrument").value + "/agent-tokens", { method: "POST", body });
      if (!r.ok) { BL.showError($("#t-error"), r.body); return; }
      $("#t-error").replaceChildren();
      tf.reset();
      await loadTokens();
      $("#t-secret-value").textContent = r.body.token;
      $("#t-secret").hidden = false;
    });
  });
})();
