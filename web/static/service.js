// Service time: staff book a service window; the answer names how many bookings it
// displaced, and the list of windows is drawn again with them.
"use strict";
(function () {
  const $ = (s) => document.querySelector(s);
  document.addEventListener("DOMContentLoaded", () => {
    const f = $("#svc-form");
    f.addEventListener("submit", async (ev) => {
      ev.preventDefault();
      const e = f.elements;
      const r = await BL.api("/api/v1/bookings", { method: "POST", body: { instrument_id: e.instrument_id.value, kind: "service",
        start: e.start.value, end: e.end.value, note: e.note.value } });
      if (!r.ok) { BL.showError($("#svc-error"), r.body); $("#svc-ok").textContent = ""; return; }
      $("#svc-error").replaceChildren();
      const n = (r.body.displaced || []).length;
      if (window.htmx) await htmx.ajax("GET", "/service", { target: "#service-windows", swap: "innerHTML" });
      const code = e.instrument_id.selectedOptions[0].textContent.split(" — ")[0];
      $("#svc-ok").textContent = "Booked service time on " + code + ", " + BL.when(r.body.start) + " to " + BL.when(r.body.end, false) +
        "; " + (n === 0 ? "no bookings displaced." : n === 1 ? "1 booking displaced, listed under the window." : n + " bookings displaced, listed under the window.");
    });
  });
})();
