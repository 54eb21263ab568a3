// Acquisition form: fill the conditions from the chosen booking's instrument, its
// latest corrector tuning and calibrations; preview the derived quantities as the
// user types (POST /api/v1/derive); record the acquisition.
"use strict";
(function () {
  const $ = (s) => document.querySelector(s);
  const fields = ["beam_current", "convergence_semiangle", "dwell_time", "pixel_size", "camera_length", "exposure_time", "defocus"];
  let aberrations = null;
  let specimen = null;
  let timer = null;
  let asked = 0;
  let filling = 0; // the latest booking chosen; answers for earlier ones are dropped

  // fmt shows four significant digits, in plain notation between 0.001 and a million.
  const fmt = (v) => {
    const a = Math.abs(v);
    if (a !== 0 && (a < 1e-3 || a >= 1e6)) return Number(v).toExponential(3).replace("e+", " × 10^").replace("e-", " × 10^-");
    return Number(v).toLocaleString("en", { maximumSignificantDigits: 4, useGrouping: false });
  };

  function conditions() {
    const f = $("#acq-form").elements;
    const c = { accelerating_voltage: f.accelerating_voltage.value };
    for (const k of fields) if (f[k].value.trim() !== "") c[k] = f[k].value.trim();
    if (f.frame_count.value !== "") c.frame_count = Number(f.frame_count.value);
    const dets = Array.from(document.querySelectorAll("#c-detectors input:checked")).map((i) => i.dataset);
    if (dets.length) {
      c.detectors = dets.map((d) => {
        const o = { name: d.name };
        if (d.inner) o.inner_angle = d.inner + " mrad", o.outer_angle = d.outer + " mrad";
        else if (d.innerRadius) o.inner_radius = d.innerRadius + " mm", o.outer_radius = d.outerRadius + " mm";
        return o;
      });
      if (!c.camera_length && c.detectors.some((d) => d.inner_radius)) c.detectors = c.detectors.filter((d) => !d.inner_radius);
      if (!c.detectors.length) delete c.detectors;
    }
    if (aberrations) c.aberrations = aberrations;
    return c;
  }

  function row(name, v) { $(name).textContent = v; }

  function render(d) {
    row("#d-wavelength", d.wavelength_pm !== undefined ? fmt(d.wavelength_pm) + " pm" : "—");
    row("#d-fluence", d.fluence_e_per_angstrom2 !== undefined ? fmt(d.fluence_e_per_angstrom2) + " e⁻/Å²" : "—");
    row("#d-fluence-rate", d.fluence_rate_e_per_angstrom2_s !== undefined ? fmt(d.fluence_rate_e_per_angstrom2_s) + " e⁻/Å²/s" : "—");
    row("#d-probe", d.probe_diameter_diffraction_pm !== undefined ? fmt(d.probe_diameter_diffraction_pm) + " pm" : "—");
    row("#d-sampling", d.sampling ? d.sampling + (d.nyquist_pixel_adf_pm ? " (Nyquist for ADF " + fmt(d.nyquist_pixel_adf_pm) + " pm)" : "") : "—");
    row("#d-aperture", d.usable_aperture_mrad !== undefined ? fmt(d.usable_aperture_mrad) + " mrad" + (d.limiting_coefficient ? ", limited by " + d.limiting_coefficient : "") : "—");
    const tb = $("#d-detectors tbody");
    tb.replaceChildren(...(d.detectors || []).map((x) => BL.el("tr", {}, BL.el("td", { text: x.name }),
      BL.el("td", { text: fmt(x.inner_mrad) }), BL.el("td", { text: fmt(x.outer_mrad) }), BL.el("td", { text: x.regime || "" }))));
    const warnings = (d.warnings || []).slice();
    if (specimen && specimen.fluence_budget_e_per_angstrom2 !== undefined && d.fluence_e_per_angstrom2 !== undefined) {
      const total = specimen.fluence_used_e_per_angstrom2 + d.fluence_e_per_angstrom2;
      if (total > specimen.fluence_budget_e_per_angstrom2) {
        warnings.push("fluence budget: specimen " + specimen.code + " would reach " + fmt(total) + " e⁻/Å² of its budget of " +
          fmt(specimen.fluence_budget_e_per_angstrom2) + " e⁻/Å² (" + fmt(specimen.fluence_used_e_per_angstrom2) + " already spent)");
      }
    }
    const ul = $("#d-warnings");
    ul.replaceChildren(...(warnings.length ? warnings.map((w) => BL.el("li", { class: "warning", text: "⚠ " + w })) : [BL.el("li", { class: "none", text: "none" })]));
  }

  async function preview() {
    const n = ++asked;
    const r = await BL.api("/api/v1/derive", { method: "POST", body: conditions() });
    if (n !== asked) return; // a newer preview is on its way
    const state = $("#preview-state");
    if (!r.ok) {
      BL.showError(state, r.body);
      state.classList.add("error");
      return;
    }
    state.classList.remove("error");
    state.textContent = "Computed from the conditions as typed (CODATA 2018 constants).";
    render(r.body);
  }

  function later() { clearTimeout(timer); timer = setTimeout(preview, 250); }

  function latest(items, key) {
    return items.slice().sort((a, b) => (a[key] < b[key] ? 1 : -1));
  }

  async function fillFromBooking() {
    const opt = $("#acq-booking").selectedOptions[0];
    if (!opt || !opt.value) return;
    const f = $("#acq-form").elements;
    f.started_at.value = opt.dataset.start;
    f.ended_at.value = opt.dataset.end;
    const id = opt.dataset.instrument;
    const n = ++filling;
    const [ins, tun, cal] = await Promise.all([BL.api("/api/v1/instruments/" + id),
      BL.api("/api/v1/instruments/" + id + "/tunings"), BL.api("/api/v1/instruments/" + id + "/calibrations")]);
    if (!ins.ok || n !== filling) return;
    const v = $("#c-voltage");
    v.replaceChildren(...ins.body.accelerating_voltages_v.map((x) => BL.el("option", { value: (x / 1000) + " kV", text: (x / 1000) + " kV" })));
    if (v.options.length) v.value = v.options[v.options.length - 1].value; // the highest, unless the tuning says otherwise
    const cals = cal.ok ? latest(cal.body.items.filter((c) => !c.corrected_by), "effective_from") : [];
    const cl = cals.find((c) => c.camera_length_m);
    if (cl) f.camera_length.value = fmt(cl.camera_length_m * 1000) + " mm";
    const px = cals.find((c) => c.pixel_size_m);
    if (px && !f.pixel_size.value) f.pixel_size.value = fmt(px.pixel_size_m * 1e10) + " Å";
    const box = $("#c-detectors");
    box.replaceChildren(BL.el("legend", { text: "Detectors in use" }));
    for (const d of ins.body.detectors || []) {
      if (d.inner_radius_m === undefined || d.outer_radius_m === undefined) continue;
      const i = BL.el("input", { type: "checkbox", id: "det-" + d.name, "data-name": d.name });
      const c = cals.find((k) => k.detector === d.name && k.inner_angle_rad !== undefined);
      if (c) { i.dataset.inner = fmt(c.inner_angle_rad * 1000); i.dataset.outer = fmt(c.outer_angle_rad * 1000); }
      else { i.dataset.innerRadius = fmt(d.inner_radius_m * 1000); i.dataset.outerRadius = fmt(d.outer_radius_m * 1000); }
      box.append(BL.el("label", { for: i.id, class: "check" }, i, " " + d.name + (c ? " (calibrated angles)" : "")));
    }
    aberrations = null;
    const tunings = tun.ok ? latest(tun.body.items.filter((t) => !t.corrected_by), "measured_at") : [];
    if (tunings.length) {
      const t = tunings[0];
      if (t.accelerating_voltage_v) v.value = (t.accelerating_voltage_v / 1000) + " kV";
      aberrations = {};
      for (const c of t.coefficients) {
        const a = { magnitude: c.magnitude_m };
        if (c.angle_rad !== undefined) a.angle = c.angle_rad;
        aberrations[c.name] = a;
      }
      $("#c-tuning").textContent = "Corrector tuning of " + new Date(t.measured_at).toLocaleString() + " applied: " +
        t.coefficients.map((c) => c.name + " " + c.text).join(", ") + ".";
    } else {
      $("#c-tuning").textContent = "No corrector tuning on record for this instrument.";
    }
    later();
  }

  async function chooseSpecimen() {
    const id = $("#acq-specimen").value;
    specimen = null;
    if (id) {
      const r = await BL.api("/api/v1/specimens/" + id);
      if (r.ok) specimen = r.body;
    }
    later();
  }

  document.addEventListener("DOMContentLoaded", () => {
    const form = $("#acq-form");
    form.addEventListener("input", (ev) => { if (ev.target.id !== "acq-notes") later(); });
    $("#acq-booking").addEventListener("change", fillFromBooking);
    $("#acq-specimen").addEventListener("change", chooseSpecimen);
    form.addEventListener("submit", async (ev) => {
      ev.preventDefault();
      const f = form.elements;
      const payload = { booking_id: f.booking_id.value, started_at: f.started_at.value, ended_at: f.ended_at.value,
        notes: f.notes.value, conditions: conditions() };
      if (f.specimen_id.value) payload.specimen_id = f.specimen_id.value;
      const r = await BL.api("/api/v1/acquisitions", { method: "POST", body: payload });
      if (!r.ok) { BL.showError($("#acq-error"), r.body); $("#acq-ok").textContent = ""; return; }
      $("#acq-error").replaceChildren();
      const w = r.body.warnings && r.body.warnings.length ? " Warnings kept with it: " + r.body.warnings.join("; ") + "." : "";
      $("#acq-ok").replaceChildren("Recorded (version " + r.body.version + ")." + w + " ",
        BL.el("a", { href: "/files?acquisition=" + r.body.id, text: "Add its data files" }));
    });
    fillFromBooking();
  });
})();

// Corrections: an acquisition's conditions as recorded, to be changed where they were
// wrong and sent as a new version with a reason (POST .../corrections). Conditions
// with no field here (detectors, aberrations, facility fields) go back as recorded.
(function () {
  const $ = (s) => document.querySelector(s);
  const scalars = [["accelerating_voltage", "Accelerating voltage"], ["beam_current", "Beam current"], ["convergence_semiangle", "Convergence semi-angle"],
    ["dwell_time", "Dwell time"], ["pixel_size", "Pixel size"], ["camera_length", "Camera length"], ["frame_count", "Frame count"],
    ["exposure_time", "Exposure time"], ["defocus", "Defocus"]];
  let current = null;

  // client turns the stored form of conditions ({si, unit, text}) back into what a
  // client sends ("300 kV").
  function client(v) {
    if (Array.isArray(v)) return v.map(client);
    if (v && typeof v === "object") {
      if ("si" in v && "unit" in v) return v.text || v.si;
      return Object.fromEntries(Object.entries(v).map(([k, x]) => [k, client(x)]));
    }
    return v;
  }

  async function load() {
    const id = $("#cor-acq").value;
    $("#cor-ok").textContent = "";
    $("#cor-error").replaceChildren();
    const r = await BL.api("/api/v1/acquisitions/" + id);
    if (!r.ok || id !== $("#cor-acq").value) { if (!r.ok) BL.showError($("#cor-error"), r.body); return; }
    current = r.body;
    const cond = client(current.conditions || {});
    const box = $("#cor-fields");
    box.replaceChildren(...scalars.map(([k, label]) => BL.el("div", {}, BL.el("label", { for: "cor-" + k, text: label }),
      BL.el("input", { id: "cor-" + k, name: k, value: cond[k] === undefined ? "" : String(cond[k]) }))));
    const kept = Object.keys(cond).filter((k) => !scalars.some(([s]) => s === k));
    $("#cor-kept").textContent = "Version " + current.version + (kept.length ? "; kept as recorded: " + kept.join(", ") + "." : ".");
  }

  document.addEventListener("DOMContentLoaded", () => {
    const f = $("#cor-form");
    if (!f) return;
    $("#cor-acq").addEventListener("change", load);
    f.addEventListener("submit", async (ev) => {
      ev.preventDefault();
      if (!current) return;
      const conditions = client(current.conditions || {});
      for (const [k] of scalars) {
        const v = f.elements[k].value.trim();
        if (v === "") delete conditions[k];
        else conditions[k] = k === "frame_count" ? Number(v) : v;
      }
      const body = { started_at: current.started_at, ended_at: current.ended_at, notes: current.notes, operator_id: current.operator_id,
        conditions, reason: f.elements.reason.value, base_version: current.version };
      if (current.specimen_id) body.specimen_id = current.specimen_id;
      const r = await BL.api("/api/v1/acquisitions/" + current.id + "/corrections", { method: "POST", body });
      if (!r.ok) { BL.showError($("#cor-error"), r.body); $("#cor-ok").textContent = ""; return; }
      f.elements.reason.value = "";
      await load();
      const w = r.body.warnings && r.body.warnings.length ? " Warnings kept with it: " + r.body.warnings.join("; ") + "." : "";
      $("#cor-ok").textContent = "Corrected: version " + r.body.version + " is now in force." + w;
    });
    load();
  });
})();
