// Rates: an instrument's rate schedules; for managers, the rate calculator, which
// recomputes as they type and saves the rates as a new schedule.
"use strict";
(function () {
  const $ = (s) => document.querySelector(s);
  const currency = () => document.body.dataset.currency || "EUR";
  const money = (minor) => new Intl.NumberFormat("en-GB", { style: "currency", currency: currency() }).format(minor / 100);
  const minor = (v) => Math.round(Number(String(v).replace(/[ ,]/g, "")) * 100);
  const bp = (v) => Math.round(Number(v) * 100);
  let timer = null;

  async function list() {
    const r = await BL.api("/api/v1/instruments/" + $("#r-instrument").value + "/rate-schedules");
    const tb = $("#r-list tbody");
    if (!r.ok) { BL.showError(tb, r.body); return; }
    const rows = [];
    for (const s of r.body.items.slice().reverse()) {
      document.body.dataset.currency = s.currency;
      for (const c of s.classes) {
        rows.push(BL.el("tr", {}, BL.el("td", { text: BL.when(s.effective_from) }), BL.el("td", { text: c.rate_class.replace("_", " ") }),
          ...[c.independent_hourly_minor, c.assisted_hourly_minor, c.training_hourly_minor, c.unattended_hourly_minor, c.staff_hourly_minor]
            .map((m) => BL.el("td", { class: "num", text: money(m) }))));
      }
    }
    tb.replaceChildren(...rows);
    if (!rows.length) tb.replaceChildren(BL.el("tr", {}, BL.el("td", { colspan: "7", class: "empty", text: "No rate schedule yet." })));
  }

  function input(save) {
    const f = $("#calc-form").elements;
    const body = { service_contract_minor: minor(f.service_contract.value), supplies_minor: minor(f.supplies.value), salary_minor: minor(f.salary.value),
      salary_share_basis_points: bp(f.salary_share.value), purchase_minor: minor(f.purchase.value), useful_life_years: Number(f.useful_life_years.value),
      projected_billable_hours: Number(f.projected_billable_hours.value), commercial_multiplier_basis_points: bp(f.commercial_multiplier.value) };
    if (save) body.save = { instrument_id: $("#r-instrument").value, effective_from: new Date(f.effective_from.value + "T00:00:00").toISOString(), staff_hourly_minor: minor(f.staff_hourly.value) };
    return body;
  }

  async function calc() {
    const r = await BL.api("/api/v1/rate-calculations", { method: "POST", body: input(false) });
    const out = $("#calc-out");
    if (!r.ok) { BL.showError($("#calc-error"), r.body); return; }
    $("#calc-error").replaceChildren();
    const c = r.body.calculation;
    out.replaceChildren(...[["Cost pool per year", c.cost_pool_minor], ["Full cost per hour", c.full_cost_hourly_minor], ["Internal per hour", c.internal_hourly_minor],
      ["External academic per hour", c.external_academic_hourly_minor], ["Commercial per hour", c.commercial_hourly_minor]]
      .flatMap(([k, v]) => [BL.el("dt", { text: k }), BL.el("dd", { class: "num", text: money(v) })]));
  }

  document.addEventListener("DOMContentLoaded", () => {
    $("#r-instrument").addEventListener("change", list);
    list();
    const f = $("#calc-form");
    if (!f) return;
    f.addEventListener("input", () => { clearTimeout(timer); timer = setTimeout(calc, 250); });
    f.addEventListener("submit", async (ev) => {
      ev.preventDefault();
      const r = await BL.api("/api/v1/rate-calculations", { method: "POST", body: input(true) });
      if (!r.ok) { BL.showError($("#calc-error"), r.body); $("#calc-ok").textContent = ""; return; }
      $("#calc-error").replaceChildren();
      await list();
      $("#calc-ok").textContent = "Saved: in force from " + BL.when(r.body.schedule.effective_from) + ".";
    });
    calc();
  });
})();
