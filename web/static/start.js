// Overview: the fair-share report of the month as a bar chart (Chart.js), with the
// same figures in a table for those who do not read charts.
"use strict";
(function () {
  document.addEventListener("DOMContentLoaded", async () => {
    const [share, projects, instruments] = await Promise.all([BL.api("/api/v1/reports/fair-share?period=month"),
      BL.api("/api/v1/projects"), BL.api("/api/v1/instruments")]);
    if (!share.ok || !projects.ok || !instruments.ok) return;
    const pc = new Map(projects.body.items.map((p) => [p.id, p.code]));
    const ic = new Map(instruments.body.items.map((i) => [i.id, i.code]));
    const lines = share.body.items;
    if (!lines.length) return;
    const labels = lines.map((l) => (pc.get(l.project_id) || "project") + " · " + (ic.get(l.instrument_id) || "instrument"));
    const h = (m) => Math.round((m / 60) * 10) / 10;
    const tb = document.querySelector("#share-table tbody");
    tb.replaceChildren(...lines.map((l, i) => BL.el("tr", {}, BL.el("th", { scope: "row", text: labels[i] }),
      BL.el("td", { text: String(h(l.allocated_minutes)) }), BL.el("td", { text: String(h(l.booked_minutes)) }), BL.el("td", { text: String(h(l.used_minutes)) }))));
    document.querySelector("#share-table").hidden = false;
    if (!window.Chart) return;
    // Colours differ in lightness as well as hue, and the bars carry a pattern-free
    // legend plus the table above, so colour is never the only cue.
    new Chart(document.getElementById("share-chart"), {
      type: "bar",
      data: {
        labels,
        datasets: [
          { label: "allocated h", data: lines.map((l) => h(l.allocated_minutes)), backgroundColor: "#c9c2b0" },
          { label: "booked h", data: lines.map((l) => h(l.booked_minutes)), backgroundColor: "#2f7d8c" },
          { label: "used h", data: lines.map((l) => h(l.used_minutes)), backgroundColor: "#17344a" },
        ],
      },
      options: { responsive: true, maintainAspectRatio: false, animation: false, scales: { y: { beginAtZero: true, title: { display: true, text: "hours" } } } },
    });
  });
})();
