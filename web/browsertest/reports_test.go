package browsertest

import (
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"beamledger/accounts"
	"beamledger/scheduling"
)

// TestReportsCharts: staff open the reports; every chart is drawn by the vendored
// Chart.js under the page's Content-Security-Policy, and every table beside a chart
// holds figures (eight weeks of utilization, projects, kinds, instruments).
func TestReportsCharts(t *testing.T) {
	s := newSite(t)
	ctx := newBrowser(t)
	s.signIn(t, ctx, accounts.RoleStaff)
	run(t, ctx, "open the reports", chromedp.Navigate(s.url+"/reports"), chromedp.WaitVisible(css("#rep-form")))
	waitText(t, ctx, "#proj-note", "h available", 20*time.Second)
	deadline := time.Now().Add(20 * time.Second)
	for eval[string](t, ctx, "ready", `document.body.dataset.reportsReady || ""`) != "true" {
		if time.Now().After(deadline) {
			t.Fatalf("the reports never finished drawing; error area: %q", text(t, ctx, "#rep-error"))
		}
		time.Sleep(200 * time.Millisecond)
	}
	for _, id := range []string{"util-chart", "proj-chart", "kind-chart", "rec-chart"} {
		if !eval[bool](t, ctx, "chart "+id, `!!(window.Chart && Chart.getChart("`+id+`"))`) {
			t.Errorf("chart %s was not drawn", id)
		}
	}
	if n := eval[int](t, ctx, "weeks", `document.querySelectorAll("#util-table tbody tr").length`); n != 8 {
		t.Errorf("%d weeks of utilization, want 8", n)
	}
	// The month's facility-wide CSV is one link away, and the session opens it.
	href := eval[string](t, ctx, "csv link", `document.querySelector("#rep-csv").href`)
	csvText := eval[string](t, ctx, "csv", `fetch(document.querySelector("#rep-csv").href).then((r) => r.ok ? r.text() : "HTTP " + r.status)`)
	if !strings.HasPrefix(csvText, strings.Join(scheduling.UtilizationCSVColumns(), ",")+"\r\n") || strings.Count(csvText, "\r\n") < 2 {
		t.Errorf("the facility CSV at %s reads %.200q", href, csvText)
	}
	// The month's table has a row for every instrument.
	if n, want := eval[int](t, ctx, "month rows", `document.querySelectorAll("#month-table tbody tr").length`),
		eval[int](t, ctx, "instruments", `fetch("/api/v1/instruments").then((r) => r.json()).then((b) => b.items.length)`); n == 0 || n != want {
		t.Errorf("%d rows in the month's table, want one per instrument (%d)", n, want)
	}
	for _, sel := range []string{"#proj-table", "#kind-table", "#rec-table"} {
		if n := eval[int](t, ctx, sel, `document.querySelectorAll("`+sel+` tbody tr").length`); n == 0 {
			t.Errorf("%s is empty", sel)
		}
	}
	screenshot(t, ctx, "reports")
}
