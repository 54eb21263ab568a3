// Beam-time calendar: place the bookings on the server-drawn grid, book a range
// picked by click or drag, change one's own bookings, join the waitlist on a taken
// range. Every answer from the API is shown in the panel beside the grid.
"use strict";
(function () {
  const $ = (s, r = document) => r.querySelector(s);
  let anchor = null; // the slot a drag started on
  let dragging = false;

  function place(root) {
    for (const e of root.querySelectorAll(".slot")) e.style.gridRow = e.dataset.row;
    for (const b of root.querySelectorAll(".block")) b.style.gridRow = b.dataset.row + " / span " + b.dataset.span;
    const cal = $(".cal", root) || $(".cal");
    if (cal && cal.dataset.range) $("#cal-range").textContent = cal.dataset.range;
  }

  function slotsOf(col) { return Array.from(col.querySelectorAll(".slot")); }

  function mark(from, to) {
    for (const s of document.querySelectorAll(".slot.picked")) s.classList.remove("picked");
    if (!from) return;
    const col = from.closest(".slots");
    const a = Number(from.dataset.row), b = Number(to.dataset.row);
    for (const s of slotsOf(col)) {
      const r = Number(s.dataset.row);
      if (r >= Math.min(a, b) && r <= Math.max(a, b)) s.classList.add("picked");
    }
  }

  // rangeOf turns two slots of one column into [start, end); a single slot stands
  // for an hour from it (or what is left of the day).
  function rangeOf(a, b) {
    const col = a.closest(".slots");
    let lo = a, hi = b;
    if (Number(b.dataset.row) < Number(a.dataset.row)) { lo = b; hi = a; }
    if (lo === hi) {
      const step = new Date(lo.dataset.end) - new Date(lo.dataset.start);
      const n = Math.max(1, Math.round(3600e3 / step));
      const all = slotsOf(col);
      hi = all[Math.min(all.length - 1, all.indexOf(lo) + n - 1)];
      mark(lo, hi);
    }
    return { instrument: lo.dataset.instrument, start: lo.dataset.start, end: hi.dataset.end };
  }

  function show(sel, on) { for (const e of document.querySelectorAll(sel)) e.hidden = !on; }

  function openPanel(mode, r, block) {
    const f = $("#book-form");
    f.dataset.mode = mode;
    f.elements.instrument_id.value = r.instrument;
    f.elements.booking_id.value = block ? block.dataset.id : "";
    f.elements.start.value = r.start;
    f.elements.end.value = r.end;
    $("#book-error").replaceChildren();
    $("#book-ok").textContent = "";
    show("#cal-panel", true);
    show("#book-form .for-new", mode === "new" || mode === "taken");
    show("#book-submit", mode === "new");
    show("#book-waitlist", mode === "taken");
    show("#book-form .for-existing", mode === "existing");
    const heading = { new: "Book this range", taken: "This range is taken", existing: "Your booking" }[mode];
    $("#panel-heading").textContent = heading;
    $("#book-detail").textContent = block ? block.dataset.kind + (block.dataset.detail ? " · " + block.dataset.detail : "") : "";
    if (block && mode === "existing" && block.dataset.mine !== "true") $("#panel-heading").textContent = "Booking";
    (mode === "existing" ? $("#book-start") : $("#book-kind")).focus();
  }

  function body(f, fields) {
    const out = {};
    for (const k of fields) if (f.elements[k].value !== "") out[k] = f.elements[k].value;
    return out;
  }

  async function reload() {
    const cal = $(".cal");
    if (cal && window.htmx) await htmx.ajax("GET", cal.dataset.gridUrl, { target: "#grid", swap: "innerHTML" });
  }

  async function send(path, method, payload, done) {
    const r = await BL.api(path, { method, body: payload });
    if (!r.ok) {
      BL.showError($("#book-error"), r.body);
      if (r.status === 409 && $("#book-form").dataset.mode === "new") show("#book-waitlist", true);
      return;
    }
    $("#book-error").replaceChildren();
    mark(null);
    await reload(); // the grid shows the change before the panel reports it
    $("#book-ok").textContent = done(r.body);
  }


  document.addEventListener("DOMContentLoaded", () => {
    place(document);
    document.body.addEventListener("htmx:afterSwap", (ev) => place(ev.detail.target));
    const grid = $("#grid");
    grid.addEventListener("pointerdown", (ev) => {
      const s = ev.target.closest(".slot");
      if (!s || s.disabled || ev.button !== 0) return;
      ev.preventDefault();
      anchor = s; dragging = true; mark(s, s);
    });
    grid.addEventListener("pointerover", (ev) => {
      const s = ev.target.closest(".slot");
      if (dragging && s && s.closest(".slots") === anchor.closest(".slots")) mark(anchor, s);
    });
    document.addEventListener("pointerup", (ev) => {
      if (!dragging) return;
      dragging = false;
      let s = ev.target.closest && ev.target.closest(".slot");
      if (!s || s.closest(".slots") !== anchor.closest(".slots")) s = anchor;
      const r = rangeOf(anchor, s);
      openPanel("new", r);
    });
    grid.addEventListener("click", (ev) => {
      const b = ev.target.closest(".block");
      if (b) {
        const r = { instrument: b.dataset.instrument, start: b.dataset.start, end: b.dataset.end };
        openPanel(b.dataset.changeable === "true" ? "existing" : "taken", r, b);
        return;
      }
      const s = ev.target.closest(".slot");
      if (s && ev.detail === 0) { mark(s, s); openPanel("new", rangeOf(s, s)); } // keyboard
    });

    const f = $("#book-form");
    f.addEventListener("submit", (ev) => {
      ev.preventDefault();
      send("/api/v1/bookings", "POST", body(f, ["instrument_id", "project_id", "kind", "start", "end", "note"]),
        (b) => "Booked: " + b.kind + ", " + BL.when(b.start) + " to " + BL.when(b.end, false) + ".");
    });
    $("#book-waitlist").addEventListener("click", () =>
      send("/api/v1/waitlist", "POST", body(f, ["instrument_id", "project_id", "kind", "start", "end"]),
        () => "You are on the waitlist for this range; you will be offered it if it frees up."));
    $("#book-move").addEventListener("click", () =>
      send("/api/v1/bookings/" + f.elements.booking_id.value, "PATCH", body(f, ["start", "end", "reason"]),
        (b) => "Moved to " + BL.when(b.start) + " – " + BL.when(b.end, false) + "."));
    $("#book-extend").addEventListener("click", () => {
      const end = new Date(new Date(f.elements.end.value).getTime() + 30 * 60e3).toISOString().replace(".000Z", "Z");
      send("/api/v1/bookings/" + f.elements.booking_id.value, "PATCH", Object.assign(body(f, ["start", "reason"]), { end }),
        (b) => "Extended to " + BL.when(b.end) + ".");
    });
    $("#book-cancel").addEventListener("click", () =>
      send("/api/v1/bookings/" + f.elements.booking_id.value + "/cancel", "POST", body(f, ["reason"]), () => "Cancelled."));
    $("#book-close").addEventListener("click", () => { show("#cal-panel", false); mark(null); });

    $("#feed-make").addEventListener("click", async () => {
      const r = await BL.api("/api/v1/me/feed-tokens", { method: "POST" });
      const ul = $("#feed-links");
      if (!r.ok) { BL.showError(ul, r.body); return; }
      const inst = $("#cal-instrument").value;
      const link = (label, path) => BL.el("li", {}, label + ": ", BL.el("a", { href: location.origin + path, text: location.origin + path }));
      ul.replaceChildren(link("Your bookings", r.body.my_bookings),
        link("This instrument", r.body.instrument.replace("{instrument_id}", inst)));
    });
  });
})();
