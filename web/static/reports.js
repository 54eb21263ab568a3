// Reports: utilization per instrument over time, hours by project, booked against
// used by kind, and cost recovery, each as a Chart.js chart with its figures in a
// table beside it.
"use strict";
(function () {
  const $ = (s) => document.querySelector(s);
  const hours = (m) => Math.round((m / 60) * 10) / 10;
  const charts = {};
  // Palette: distinct in lightness as well as hue; the tables carry the same figures.
  const palette = ["#17344a", "#2f7d8c", "#b5651d", "#6b4fa0", "#4d7d2f", "#9b3520"];

  function draw(id, type, labels, datasets, yTitle) {
    if (!window.Chart) return;
    if (charts[id]) charts[id].destroy();
    charts[id] = new Chart(document.getElementById(id), {
      type, data: { labels, datasets: datasets.map((d, i) => Object.assign({ backgroundColor: palette[i % palette.length], borderColor: palette[i % palette.length] }, d)) },
      options: { responsive: true, maintainAspectRatio: false, animation: false, scales: { y: { beginAtZero: true, title: { display: true, text: yTitle } } } },
    });
  }

  function rows(sel, data) {
    $(sel + " tbody").replaceChildren(...data.map((cells) => BL.el("tr", {}, BL.el("th", { scope: "row", text: cells[0] }),
      ...cells.slice(1).map((c) => BL.el("td", { class: "num", text: String(c) })))));
  }

  const day = (d) => d.toISOString().slice(0, 10);

  async function show() {
    const err = $("#rep-error");
    err.replaceChildren();
    const f = $("#rep-form").elements;
    const [y, m] = f.month.value.split("-").map(Number);
    const from = day(new Date(Date.UTC(y, m - 1, 1))), to = day(new Date(Date.UTC(y, m, 1)));
    const [ins, projects] = await Promise.all([BL.api("/api/v1/instruments"), BL.api("/api/v1/projects")]);
    if (!ins.ok || !projects.ok) { BL.showError(err, (ins.ok ? projects : ins).body); return; }
    const code = new Map(ins.body.items.map((i) => [i.id, i.code]));
    const pcode = new Map(projects.body.items.map((p) => [p.id, p.code]));

    $("#rep-csv").href = "/api/v1/reports/facility-utilization?format=csv&from=" + from + "&to=" + to;
    $("#rep-csv").download = "utilization-" + f.month.value + ".csv";
    const month = await BL.api("/api/v1/reports/facility-utilization?from=" + from + "&to=" + to);
    if (!month.ok) { BL.showError(err, month.body); return; }
    rows("#month-table", month.body.instruments.map((r) => [code.get(r.instrument_id) || "instrument", hours(r.available_minutes), hours(r.booked_minutes),
      hours(r.used_minutes), hours(r.no_show_minutes), hours(r.cancelled_late_minutes), (r.uptime_permille / 10) + " %"])
      .sort((a, b) => a[0].localeCompare(b[0])));
    const u = await BL.api("/api/v1/reports/utilization?instrument_id=" + f.instrument_id.value + "&from=" + from + "&to=" + to);
    if (!u.ok) { BL.showError(err, u.body); return; }
    const r = u.body;
    $("#proj-note").textContent = code.get(r.instrument_id) + ", " + f.month.value + ": " + hours(r.available_minutes) + " h available, " +
      hours(r.booked_minutes) + " h booked, " + hours(r.used_minutes) + " h used, uptime " + (r.uptime_permille / 10) + " %.";
    const bp = r.by_project.map((p) => [pcode.get(p.project_id) || "project", hours(p.booked_minutes), hours(p.used_minutes), hours(p.no_show_minutes),
      p.quota_used_permille !== undefined ? (p.quota_used_permille / 10) + " %" : "—"]);
    rows("#proj-table", bp);
    draw("proj-chart", "bar", bp.map((x) => x[0]), [{ label: "booked h", data: bp.map((x) => x[1]) }, { label: "used h", data: bp.map((x) => x[2]) }], "hours");
    const bk = r.by_kind.map((k) => [k.kind, hours(k.booked_minutes), hours(k.used_minutes), hours(k.cancelled_late_minutes)]);
    rows("#kind-table", bk);
    draw("kind-chart", "bar", bk.map((x) => x[0]), [{ label: "booked h", data: bk.map((x) => x[1]) }, { label: "used h", data: bk.map((x) => x[2]) }], "hours");

    // Eight weeks ending with the month, per bookable instrument.
    const end = new Date(Date.UTC(y, m, 1));
    const weeks = [];
    for (let i = 8; i > 0; i--) weeks.push([day(new Date(end - i * 7 * 864e5)), day(new Date(end - (i - 1) * 7 * 864e5))]);
    // One facility-wide report per week holds every instrument's figures.
    const bookable = ins.body.items.filter((i) => i.bookable);
    const got = await Promise.all(weeks.map(([a, b]) => BL.api("/api/v1/reports/facility-utilization?from=" + a + "&to=" + b)));
    const series = bookable.map((i) => ({ label: i.code, data: got.map((g) => {
      const r = g.ok ? g.body.instruments.find((x) => x.instrument_id === i.id) : undefined;
      return r ? r.booked_permille / 10 : null;
    }) }));
    $("#util-table thead").replaceChildren(BL.el("tr", {}, BL.el("th", { scope: "col", text: "Week from" }), ...series.map((s) => BL.el("th", { scope: "col", text: s.label }))));
    rows("#util-table", weeks.map(([a], wi) => [a, ...series.map((s) => (s.data[wi] === null ? "—" : s.data[wi] + " %"))]));
    draw("util-chart", "line", weeks.map(([a]) => a), series.map((s) => Object.assign(s, { tension: 0.2 })), "% of available time booked");

    const rec = await BL.api("/api/v1/reports/recovery?fiscal_year=" + y);
    if (rec.ok) {
      const cur = (n) => new Intl.NumberFormat("en-GB", { maximumFractionDigits: 0 }).format(n / 100);
      const lines = rec.body.lines.map((l) => [code.get(l.instrument_id) || "instrument", cur(l.costs_minor), cur(l.charged_minor), (l.recovered_permille / 10) + " %"]);
      rows("#rec-table", lines);
      draw("rec-chart", "bar", lines.map((x) => x[0]), [{ label: "costs", data: rec.body.lines.map((l) => l.costs_minor / 100) },
        { label: "charged", data: rec.body.lines.map((l) => l.charged_minor / 100) }], "currency units");
    }
    document.body.dataset.reportsReady = "true";
  }

  document.addEventListener("DOMContentLoaded", () => {
    $("#rep-form").addEventListener("submit", (ev) => { ev.preventDefault(); delete document.body.dataset.reportsReady; show(); });
    show();
  });
})();
