// Qualifications: staff grant a person's standing on an instrument, and revoke it
// with a reason; the list shows what is in force.
"use strict";
(function () {
  const $ = (s) => document.querySelector(s);
  const label = (sel, v) => { const o = Array.from($(sel).options).find((x) => x.value === v); return o ? o.textContent : v; };

  async function list() {
    const r = await BL.api("/api/v1/qualifications");
    if (!r.ok) { BL.showError($("#q-error"), r.body); return; }
    $("#qual-list tbody").replaceChildren(...r.body.items.map((q) => {
      const revoke = BL.el("button", { type: "button", class: "quiet small", text: "Revoke" });
      revoke.addEventListener("click", async () => {
        const reason = $("#q-revoke-reason").value.trim();
        const res = await BL.api("/api/v1/qualifications/" + q.id + "/revoke", { method: "POST", body: { reason } });
        if (!res.ok) { BL.showError($("#q-error"), res.body); return; }
        await list();
        $("#q-ok").textContent = "Revoked.";
      });
      return BL.el("tr", { "data-user": q.user_id, "data-instrument": q.instrument_id },
        BL.el("td", { text: label("#q-user", q.user_id) }), BL.el("td", { text: label("#q-instrument", q.instrument_id).split(" — ")[0] }),
        BL.el("td", {}, BL.el("span", { class: "level level-" + q.level, text: q.level })), BL.el("td", { text: BL.when(q.granted_at) }), BL.el("td", {}, revoke));
    }));
  }

  document.addEventListener("DOMContentLoaded", () => {
    const f = $("#qual-form");
    f.addEventListener("submit", async (ev) => {
      ev.preventDefault();
      const body = { user_id: f.elements.user_id.value, level: f.elements.level.value, reason: f.elements.reason.value };
      if (f.elements.expires_after_idle_days.value) body.expires_after_idle_days = Number(f.elements.expires_after_idle_days.value);
      const r = await BL.api("/api/v1/instruments/" + f.elements.instrument_id.value + "/qualifications", { method: "POST", body });
      if (!r.ok) { BL.showError($("#q-error"), r.body); $("#q-ok").textContent = ""; return; }
      $("#q-error").replaceChildren();
      await list();
      $("#q-ok").textContent = "Granted: " + label("#q-user", r.body.user_id) + " is " + r.body.level + " on " + label("#q-instrument", r.body.instrument_id).split(" — ")[0] + ".";
    });
    list();
  });
})();
