// Instruments: capabilities and the booking rules in force for everyone; managers add
// instruments, open or close them to bookings, and change the facility's rules or an
// instrument's own.
"use strict";
(function () {
  const $ = (s) => document.querySelector(s);
  const manage = () => !!$("#rules-form");
  const dayNames = ["Sun", "Mon", "Tue", "Wed", "Thu", "Fri", "Sat"];
  const numbers = [
    ["slot_minutes", "Slot granularity", "min"], ["min_length_minutes", "Shortest booking", "min"],
    ["max_length_minutes", "Longest booking", "min"], ["max_unattended_length_minutes", "Longest unattended booking", "min"],
    ["lead_time_minutes", "Lead time", "min"], ["horizon_days", "Horizon", "days"],
    ["prime_allowance_minutes_per_week", "Prime-time allowance per project and week", "min"], ["no_show_grace_minutes", "No-show grace", "min"],
  ];
  const windows = [["opening_hours", "Opening hours (outside: out-of-hours)"], ["prime_time", "Prime time"]];
  let instruments = [];
  let rules = { facility: null, byInstrument: new Map() };

  // days shows weekdays Monday first, runs of three or more as ranges.
  function days(ds) {
    const on = [1, 2, 3, 4, 5, 6, 0].map((d) => ds.includes(d));
    if (!ds.length || on.every(Boolean)) return "every day";
    const name = (i) => dayNames[(i + 1) % 7];
    const parts = [];
    for (let i = 0; i < 7; i++) {
      if (!on[i]) continue;
      let j = i;
      while (j + 1 < 7 && on[j + 1]) j++;
      if (j - i >= 2) parts.push(name(i) + "–" + name(j));
      else for (let k = i; k <= j; k++) parts.push(name(k));
      i = j;
    }
    return parts.join(", ");
  }
  const showWindows = (ws) => (ws && ws.length ? ws.map((w) => days(w.days || []) + " " + w.start + "–" + w.end).join("; ") : "none");

  // parseWindows reads "Mon–Fri 08:00–18:00; Sat 09:00–13:00" into the API's windows,
  // or throws the problem in words.
  function parseWindows(text) {
    if (text.trim().toLowerCase() === "none") return [];
    return text.split(";").map((part, n) => {
      const m = part.trim().match(/^(.*?)\s*(\d{2}:\d{2})\s*[-–]\s*(\d{2}:\d{2})$/);
      if (!m) throw new Error("window " + (n + 1) + ": write days then HH:MM–HH:MM, e.g. Mon–Fri 08:00–18:00");
      const out = { days: [], start: m[2], end: m[3] };
      const spec = m[1].trim().toLowerCase();
      if (spec === "" || spec === "every day") return out;
      const idx = (s) => {
        const i = dayNames.findIndex((d) => d.toLowerCase() === s.trim().slice(0, 3).toLowerCase());
        if (i < 0) throw new Error("window " + (n + 1) + ": unknown day " + JSON.stringify(s.trim()));
        return i;
      };
      for (const tok of spec.split(",")) {
        const r = tok.split(/[-–]/);
        if (r.length === 1) { out.days.push(idx(r[0])); continue; }
        // Monday-first order, so Fri–Mon wraps through the weekend.
        let a = (idx(r[0]) + 6) % 7; const b = (idx(r[1]) + 6) % 7;
        for (;;) { out.days.push((a + 1) % 7); if (a === b) break; a = (a + 1) % 7; }
      }
      return out;
    });
  }

  const radius = (m) => (m === undefined ? "" : String(Math.round(m * 1e5) / 100));
  function detector(d) {
    const r = d.inner_radius_m !== undefined || d.outer_radius_m !== undefined ? " " + radius(d.inner_radius_m) + "–" + radius(d.outer_radius_m) + " mm" : "";
    return BL.el("li", { text: d.name + " (" + d.kind + ")" + r });
  }

  function capabilityRow(i) {
    const bookable = BL.el("td", { class: "bookable" }, BL.el("span", { class: "status " + (i.bookable ? "status-open" : "status-closed"), text: i.bookable ? "open" : "closed" }));
    if (manage()) {
      const b = BL.el("button", { type: "button", class: "quiet small", text: i.bookable ? "Close to bookings" : "Open to bookings" });
      b.addEventListener("click", async () => {
        const r = await BL.api("/api/v1/instruments/" + i.id + "/bookable", { method: "PUT", body: { bookable: !i.bookable } });
        if (!r.ok) { BL.showError($("#ins-list-error"), r.body); return; }
        $("#ins-list-error").replaceChildren();
        await load();
        $("#ins-list-ok").textContent = r.body.code + " is " + (r.body.bookable ? "open to bookings." : "closed to new bookings; bookings already made stay.");
      });
      bookable.append(" ", b);
    }
    return BL.el("tr", { "data-code": i.code },
      BL.el("th", { scope: "row", text: i.code }), BL.el("td", { text: i.name }), BL.el("td", { text: i.kind }),
      BL.el("td", { text: (i.accelerating_voltages_v || []).map((v) => v / 1000 + " kV").join(", ") || "—" }),
      BL.el("td", { text: i.corrector.replaceAll("_", " ") }),
      BL.el("td", {}, BL.el("ul", { class: "plain" }, ...(i.detectors || []).map(detector))),
      BL.el("td", { text: i.location || "—" }), bookable);
  }

  function rulesTable() {
    const head = $("#rules-table thead tr");
    head.replaceChildren(BL.el("th", { scope: "col", text: "Rule" }), BL.el("th", { scope: "col", text: "Facility" }),
      ...instruments.map((i) => BL.el("th", { scope: "col", text: i.code })));
    const cell = (text, own) => BL.el("td", { class: own ? "own" : "", text: text + (own ? " (own)" : "") });
    const rows = [];
    for (const [k, label, unit] of numbers) {
      rows.push(BL.el("tr", { "data-rule": k }, BL.el("th", { scope: "row", text: label }),
        cell(rules.facility.effective[k] + " " + unit, false),
        ...instruments.map((i) => { const r = rules.byInstrument.get(i.id); return cell(r.effective[k] + " " + unit, r.override[k] !== undefined); })));
    }
    for (const [k, label] of windows) {
      rows.push(BL.el("tr", { "data-rule": k }, BL.el("th", { scope: "row", text: label }),
        cell(showWindows(rules.facility.effective[k]), false),
        ...instruments.map((i) => { const r = rules.byInstrument.get(i.id); return cell(showWindows(r.effective[k]), r.override[k] !== null && r.override[k] !== undefined); })));
    }
    $("#rules-table tbody").replaceChildren(...rows);
  }

  async function load() {
    const [ins, fac] = await Promise.all([BL.api("/api/v1/instruments"), BL.api("/api/v1/facility/booking-rules")]);
    if (!ins.ok || !fac.ok) { BL.showError($("#ins-list-error"), (ins.ok ? fac : ins).body); return; }
    instruments = ins.body.items;
    rules.facility = fac.body;
    const each = await Promise.all(instruments.map((i) => BL.api("/api/v1/instruments/" + i.id + "/booking-rules")));
    rules.byInstrument = new Map(instruments.map((i, n) => [i.id, each[n].body]));
    $("#ins-list tbody").replaceChildren(...instruments.map(capabilityRow));
    rulesTable();
    const scope = $("#ru-scope");
    if (scope) {
      const keep = scope.value;
      scope.replaceChildren(BL.el("option", { value: "", text: "the facility (every instrument)" }),
        ...instruments.map((i) => BL.el("option", { value: i.id, text: i.code + " — " + i.name })));
      scope.value = keep;
      fillRules();
    }
  }

  // fillRules shows the chosen level's own rules, with what it inherits as placeholders.
  function fillRules() {
    const id = $("#ru-scope").value;
    const mine = id ? rules.byInstrument.get(id) : rules.facility;
    if (!mine) return;
    const f = $("#rules-form").elements;
    for (const [k] of numbers) {
      f[k].value = mine.override[k] !== undefined ? mine.override[k] : "";
      f[k].placeholder = String(mine.effective[k]);
    }
    for (const [k] of windows) {
      const own = mine.override[k];
      f[k].value = own === null || own === undefined ? "" : showWindows(own);
      f[k].placeholder = showWindows(mine.effective[k]);
    }
  }

  function rulesBody() {
    const f = $("#rules-form").elements;
    const body = {};
    const problems = {};
    for (const [k] of numbers) if (f[k].value.trim() !== "") body[k] = Number(f[k].value);
    for (const [k] of windows) {
      body[k] = null;
      if (f[k].value.trim() === "") continue;
      try { body[k] = parseWindows(f[k].value); } catch (e) { problems[k] = e.message; }
    }
    return { body, problems };
  }

  function detectors(text) {
    const out = [];
    const lines = text.split("\n").map((l) => l.trim()).filter(Boolean);
    lines.forEach((l, n) => {
      const p = l.split(",").map((x) => x.trim());
      const d = { name: p[0], kind: p[1] || "" };
      if (p.length > 2) {
        const inner = Number(p[2]), outer = Number(p[3]);
        if (p.length !== 4 || !isFinite(inner) || !isFinite(outer) || p[2] === "" || p[3] === "") throw new Error("line " + (n + 1) + ": give both radii in mm, or neither");
        d.inner_radius_m = inner / 1000; d.outer_radius_m = outer / 1000;
      }
      out.push(d);
    });
    return out;
  }

  const fieldError = (el, field, message) => BL.showError(el, { error: { message: "Check the form.", fields: { [field]: message } } });

  document.addEventListener("DOMContentLoaded", () => {
    load();
    if (!manage()) return;
    $("#ru-scope").addEventListener("change", () => { fillRules(); $("#ru-error").replaceChildren(); $("#ru-ok").textContent = ""; });
    $("#rules-form").addEventListener("submit", async (ev) => {
      ev.preventDefault();
      $("#ru-ok").textContent = "";
      const { body, problems } = rulesBody();
      const bad = Object.keys(problems);
      if (bad.length) { fieldError($("#ru-error"), bad[0], problems[bad[0]]); return; }
      const id = $("#ru-scope").value;
      const r = await BL.api(id ? "/api/v1/instruments/" + id + "/booking-rules" : "/api/v1/facility/booking-rules", { method: "PUT", body });
      if (!r.ok) { BL.showError($("#ru-error"), r.body); return; }
      $("#ru-error").replaceChildren();
      await load();
      $("#ru-ok").textContent = "Saved the rules of " + (id ? instruments.find((i) => i.id === id).code : "the facility") + ".";
    });
    $("#ins-form").addEventListener("submit", async (ev) => {
      ev.preventDefault();
      const f = ev.target.elements;
      $("#in-ok").textContent = "";
      let dets;
      try { dets = detectors(f.detectors.value); } catch (e) { fieldError($("#in-error"), "detectors", e.message); return; }
      const volts = f.voltages.value.split(/[,\s]+/).filter(Boolean).map((v) => Number(v) * 1000);
      if (volts.some((v) => !isFinite(v))) { fieldError($("#in-error"), "accelerating_voltages_v", "give kilovolts as numbers separated by commas"); return; }
      const body = { code: f.code.value, name: f.name.value, kind: f.kind.value, location: f.location.value, bookable: f.bookable.checked,
        accelerating_voltages_v: volts, corrector: f.corrector.value, detectors: dets };
      const r = await BL.api("/api/v1/instruments", { method: "POST", body });
      if (!r.ok) { BL.showError($("#in-error"), r.body); return; }
      $("#in-error").replaceChildren();
      ev.target.reset();
      await load();
      $("#in-ok").textContent = "Added " + r.body.code + ".";
    });
  });
})();
