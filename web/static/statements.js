// Statements: a project's monthly statements, drafts computed and issued by
// managers, each readable as a printable page or CSV.
"use strict";
(function () {
  const $ = (s) => document.querySelector(s);
  const manage = () => !!$("#st-compute");
  const money = (minor, currency) => new Intl.NumberFormat("en-GB", { style: "currency", currency }).format(minor / 100);
  const month = (iso) => new Intl.DateTimeFormat("en-GB", { timeZone: document.querySelector('meta[name="facility-zone"]').content, month: "long", year: "numeric" }).format(new Date(iso));

  async function list() {
    const id = $("#st-project").value;
    const tb = $("#st-list tbody");
    if (!id) { tb.replaceChildren(); return; }
    const r = await BL.api("/api/v1/projects/" + id + "/statements");
    if (!r.ok) { BL.showError($("#st-error"), r.body); return; }
    tb.replaceChildren(...r.body.items.map((s) => {
      const actions = BL.el("td", { class: "actions" },
        BL.el("a", { href: "/api/v1/statements/" + s.id + "?format=html", target: "_blank", rel: "noopener", text: "Printable" }), " · ",
        BL.el("a", { href: "/api/v1/statements/" + s.id + "?format=csv", download: "", text: "CSV" }), " · ",
        BL.el("a", { href: "/api/v1/statements/" + s.id + "?format=pdf", download: "", text: "PDF" }), " · ");
      const lines = BL.el("button", { type: "button", class: "quiet small", text: "Lines" });
      lines.addEventListener("click", () => detail(s.id));
      actions.append(lines);
      if (manage() && s.status === "draft") {
        const issue = BL.el("button", { type: "button", class: "small issue", "data-statement": s.id, text: "Issue" });
        issue.addEventListener("click", () => issueIt(s));
        actions.append(" ", issue);
      }
      return BL.el("tr", { "data-statement": s.id, "data-status": s.status },
        BL.el("td", { text: month(s.period_start) }), BL.el("td", {}, BL.el("span", { class: "status status-" + s.status, text: s.status })),
        BL.el("td", { class: "num", text: money(s.total_minor, s.currency) }), BL.el("td", { text: BL.when(s.computed_at) }), actions);
    }));
    if (!r.body.items.length) tb.replaceChildren(BL.el("tr", {}, BL.el("td", { colspan: "5", class: "empty", text: "No statements yet." })));
  }

  async function detail(id) {
    const r = await BL.api("/api/v1/statements/" + id);
    if (!r.ok) { BL.showError($("#st-error"), r.body); return; }
    const s = r.body;
    $("#h-lines").textContent = "Lines of " + month(s.period_start) + " (" + s.status + ")";
    $("#st-lines tbody").replaceChildren(...(s.lines || []).map((l) => BL.el("tr", {},
      BL.el("td", { text: String(l.line_no) }), BL.el("td", { text: l.component.replaceAll("_", " ") }),
      BL.el("td", { text: l.booking_start ? (l.booking_kind || "") + " " + BL.when(l.booking_start) : (l.reason || "") }),
      BL.el("td", { text: l.rule.replaceAll("_", " ") }), BL.el("td", { class: "num", text: String(l.minutes) }),
      BL.el("td", { class: "num", text: money(l.hourly_rate_minor, s.currency) }), BL.el("td", { class: "num", text: money(l.amount_minor, s.currency) }))));
    $("#st-detail").hidden = false;
  }

  async function issueIt(s) {
    const r = await BL.api("/api/v1/statements/" + s.id + "/issue", { method: "POST" });
    if (!r.ok) { BL.showError($("#st-error"), r.body); return; }
    $("#st-error").replaceChildren();
    await list();
    $("#st-ok").textContent = "Issued the statement of " + month(s.period_start) + ": " + money(r.body.total_minor, r.body.currency) + ".";
  }

  document.addEventListener("DOMContentLoaded", () => {
    $("#st-project").addEventListener("change", () => { $("#st-detail").hidden = true; list(); });
    const f = $("#st-compute");
    if (f) {
      f.addEventListener("submit", async (ev) => {
        ev.preventDefault();
        const r = await BL.api("/api/v1/projects/" + $("#st-project").value + "/statements", { method: "POST", body: { month: f.elements.month.value } });
        if (!r.ok) { BL.showError($("#st-error"), r.body); $("#st-ok").textContent = ""; return; }
        $("#st-error").replaceChildren();
        await list();
        $("#st-ok").textContent = "Draft of " + month(r.body.period_start) + " computed: " + money(r.body.total_minor, r.body.currency) + ".";
      });
    }
    list();
  });
})();
