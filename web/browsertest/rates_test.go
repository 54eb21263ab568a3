package browsertest

import (
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"beamledger/accounts"
)

// TestRateCalculator: the manager types a year's costs into the calculator and
// watches the hourly rates follow, then saves them as the instrument's next schedule.
func TestRateCalculator(t *testing.T) {
	s := newSite(t)
	ctx := newBrowser(t)
	s.signIn(t, ctx, accounts.RoleManager)
	run(t, ctx, "open rates", chromedp.Navigate(s.url+"/rates"), chromedp.WaitVisible(css("#calc-form")))
	waitText(t, ctx, "#r-list tbody", "internal", 10*time.Second)
	// 150 000 a year over 1 500 billable hours is 100 an hour at full cost
	// [constructed: cost pool / billable hours].
	run(t, ctx, "type the costs", retype("#c-service", "100000"), retype("#c-supplies", "50000"),
		retype("#c-purchase", "0"), retype("#c-hours", "1500"))
	waitText(t, ctx, "#calc-out", "Full cost per hour€100.00", 10*time.Second)
	screenshot(t, ctx, "rates")
	rows := eval[int](t, ctx, "rows", `document.querySelectorAll("#r-list tbody tr").length`)
	run(t, ctx, "save", chromedp.Click(css("#calc-save")))
	waitText(t, ctx, "#calc-ok", "Saved: in force from", 10*time.Second)
	if after := eval[int](t, ctx, "rows", `document.querySelectorAll("#r-list tbody tr").length`); after != rows+3 {
		t.Fatalf("%d schedule rows after saving one (three classes) over %d", after, rows)
	}
}
