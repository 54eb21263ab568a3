package browsertest

import (
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"beamledger/accounts"
	"beamledger/demo"
)

// TestIssueStatement: the manager recomputes a project's draft for this month,
// issues it, and reads it as CSV and as a printable page; a researcher sees the
// statements of their project but cannot issue.
func TestIssueStatement(t *testing.T) {
	s := newSite(t)
	loc, err := time.LoadLocation(demo.Facility.TimeZone)
	if err != nil {
		t.Fatal(err)
	}
	thisMonth := time.Now().In(loc).Format("January 2006")
	ctx := newBrowser(t)
	s.signIn(t, ctx, accounts.RoleManager)
	run(t, ctx, "open statements", chromedp.Navigate(s.url+"/statements"), chromedp.WaitVisible(css("#st-project")))
	eval[bool](t, ctx, "choose the project", `(() => { const s = document.querySelector("#st-project");
		s.value = Array.from(s.options).find(o => o.textContent.startsWith("SSB-INTERFACE")).value; s.dispatchEvent(new Event("change")); return true; })()`)
	waitText(t, ctx, "#st-list tbody", "draft", 10*time.Second)
	run(t, ctx, "compute the draft", chromedp.Click(css("#st-compute-go")))
	waitText(t, ctx, "#st-ok", "Draft of "+thisMonth+" computed", 10*time.Second)
	screenshot(t, ctx, "statements-draft")
	run(t, ctx, "issue it", chromedp.Click(css(`#st-list tr[data-status="draft"] button.issue`)))
	waitText(t, ctx, "#st-ok", "Issued the statement of "+thisMonth, 10*time.Second)
	if n := eval[int](t, ctx, "drafts left", `document.querySelectorAll('#st-list tr[data-status="draft"]').length`); n != 0 {
		t.Fatalf("%d drafts left after issuing", n)
	}
	got := eval[string](t, ctx, "read the printable page, the CSV and the PDF", `(async () => {
		const row = document.querySelector('#st-list tr[data-status="issued"]');
		const links = row.querySelectorAll("a");
		const out = [];
		for (const a of links) { const r = await fetch(a.href); out.push(r.status + " " + r.headers.get("Content-Type").split(";")[0]); }
		return out.join(", ");
	})()`)
	if got != "200 text/html, 200 text/csv, 200 application/pdf" {
		t.Fatalf("printable page, CSV and PDF: %s", got)
	}
	screenshot(t, ctx, "statements-issued")

	run(t, ctx, "sign out", chromedp.Click(css("#sign-out")), chromedp.WaitVisible(css("#sign-in-form")))
	s.signIn(t, ctx, accounts.RoleResearcher)
	run(t, ctx, "researcher's statements", chromedp.Navigate(s.url+"/statements"), chromedp.WaitVisible(css("#st-project")))
	waitText(t, ctx, "#st-list tbody", "issued", 10*time.Second)
	if n := eval[int](t, ctx, "issue buttons", `document.querySelectorAll("#st-list button.issue, #st-compute").length`); n != 0 {
		t.Fatalf("a researcher is offered %d manager controls", n)
	}
	if strings.Contains(text(t, ctx, "#st-error"), "forbidden") {
		t.Fatal("the researcher's statements page reports an error")
	}
}
