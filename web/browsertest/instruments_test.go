package browsertest

import (
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"beamledger/accounts"
)

// TestInstrumentsPage: the manager reads the instruments' capabilities and the rules
// in force, gives the TEM its own slot granularity, sees a bad window and a bad code
// refused beside their forms naming the field, adds an instrument and closes one to
// bookings; staff read the same page without the forms.
func TestInstrumentsPage(t *testing.T) {
	s := newSite(t)
	ctx := newBrowser(t)
	s.signIn(t, ctx, accounts.RoleManager)
	run(t, ctx, "open instruments", chromedp.Navigate(s.url+"/instruments"), chromedp.WaitVisible(css("#rules-form")))
	if got := text(t, ctx, "#ins-safety"); !strings.Contains(got, "never replace") {
		t.Fatalf("the page must say its records support, and never replace, safety training: %q", got)
	}
	// The demo STEM's HAADF detector spans 4.8 to 16 mm (demo/demo.go).
	waitText(t, ctx, `#ins-list tr[data-code="STEM-CORR"]`, "HAADF (annular) 4.8–16 mm", 10*time.Second)
	waitText(t, ctx, `#ins-list tr[data-code="STEM-CORR"]`, "60 kV, 80 kV, 200 kV, 300 kV", time.Second)
	// The default rules: 15-minute slots, weekday opening 08:00–18:00 (scheduling.DefaultRules).
	waitText(t, ctx, `#rules-table tr[data-rule="slot_minutes"]`, "15 min", 10*time.Second)
	waitText(t, ctx, `#rules-table tr[data-rule="opening_hours"]`, "Mon–Fri 08:00–18:00", time.Second)

	tem := eval[string](t, ctx, "find the TEM", `Array.from(document.querySelectorAll("#ru-scope option")).find(o => o.textContent.startsWith("TEM-200")).value`)
	eval[bool](t, ctx, "choose the TEM", `(() => { const s = document.querySelector("#ru-scope"); s.value = "`+tem+`";
		return s.dispatchEvent(new Event("change")); })()`)
	run(t, ctx, "an impossible window", retype("#ru-opening_hours", "Mon–Fri 25:00–18:00"), chromedp.Click(css("#ru-save")))
	waitText(t, ctx, "#ru-error", "opening_hours", 10*time.Second)
	run(t, ctx, "30-minute slots on the TEM", retype("#ru-opening_hours", "Mon–Sat 07:00–19:00"), retype("#ru-slot_minutes", "30"), chromedp.Click(css("#ru-save")))
	waitText(t, ctx, "#ru-ok", "Saved the rules of TEM-200.", 10*time.Second)
	temCol := eval[int](t, ctx, "TEM column", `Array.from(document.querySelectorAll("#rules-table thead th")).findIndex(th => th.textContent === "TEM-200") + 1`)
	waitText(t, ctx, `#rules-table tr[data-rule="slot_minutes"] td:nth-child(`+strconv.Itoa(temCol)+`)`, "30 min (own)", 10*time.Second)
	waitText(t, ctx, `#rules-table tr[data-rule="opening_hours"] td:nth-child(`+strconv.Itoa(temCol)+`)`, "Mon–Sat 07:00–19:00 (own)", time.Second)
	if got := text(t, ctx, `#rules-table tr[data-rule="slot_minutes"] td:nth-child(2)`); got != "15 min" {
		t.Fatalf("the TEM's own rule changed the facility's: %q", got)
	}

	run(t, ctx, "a bad code", retype("#in-code", "x"), retype("#in-name", "Cryo TEM"), retype("#in-voltages", "300"), chromedp.Click(css("#in-create")))
	waitText(t, ctx, "#in-error", "code", 10*time.Second)
	run(t, ctx, "a good one", retype("#in-code", "CRYO-300"), retype("#in-detectors", "HAADF, annular, 5, 20"), chromedp.Click(css("#in-create")))
	waitText(t, ctx, "#in-ok", "Added CRYO-300.", 10*time.Second)
	waitText(t, ctx, `#ins-list tr[data-code="CRYO-300"]`, "HAADF (annular) 5–20 mm", 10*time.Second)

	run(t, ctx, "close the plasma cleaner", chromedp.Click(css(`#ins-list tr[data-code="PLASMA"] button`)))
	waitText(t, ctx, "#ins-list-ok", "PLASMA is closed to new bookings", 10*time.Second)
	waitText(t, ctx, `#ins-list tr[data-code="PLASMA"] .bookable`, "closed", 10*time.Second)
	screenshot(t, ctx, "instruments")

	staff := newBrowser(t)
	s.signIn(t, staff, accounts.RoleStaff)
	run(t, staff, "staff open instruments", chromedp.Navigate(s.url+"/instruments"), chromedp.WaitVisible(css("#ins-list")))
	waitText(t, staff, `#ins-list tr[data-code="PLASMA"] .bookable`, "closed", 10*time.Second)
	if n := eval[int](t, staff, "forms", `document.querySelectorAll("#rules-form, #ins-form, #ins-list button").length`); n != 0 {
		t.Fatalf("staff read the instruments only, yet see %d forms or buttons", n)
	}
}
