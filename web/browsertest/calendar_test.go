package browsertest

import (
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"beamledger/accounts"
)

// TestDragKeyboardExtendCancel books by dragging across free time and by the
// keyboard alone, then extends one booking and cancels the other from the panel.
func TestDragKeyboardExtendCancel(t *testing.T) {
	s := newSite(t)
	ctx := newBrowser(t)
	s.signIn(t, ctx, accounts.RoleResearcher)
	run(t, ctx, "open the calendar", chromedp.Navigate(s.url+"/calendar"), chromedp.WaitVisible(css("#cal-instrument")))
	tem := eval[string](t, ctx, "find the TEM",
		`Array.from(document.querySelectorAll("#cal-instrument option")).find(o => o.textContent.startsWith("TEM-200")).value`)
	day := time.Now().AddDate(0, 0, 28)
	for day.Weekday() != time.Tuesday {
		day = day.AddDate(0, 0, 1)
	}
	date := day.Format(time.DateOnly)
	slot := func(hhmm string) string { return `.slot[data-start^="` + date + "T" + hhmm + `"]` }
	run(t, ctx, "open the TEM's day",
		chromedp.Navigate(s.url+"/calendar?view=day&instrument="+tem+"&date="+date),
		chromedp.WaitVisible(css(".cal-day .slot")))

	// Drag from 13:00 down to the 15:45 slot: 13:00–16:00.
	run(t, ctx, "drag 13:00 to 15:45", chromedp.DragAndDrop(css(slot("13:00")), css(slot("15:45"))), chromedp.WaitVisible(css("#book-form")))
	start := eval[string](t, ctx, "start", `document.querySelector("#book-start").value`)
	end := eval[string](t, ctx, "end", `document.querySelector("#book-end").value`)
	if !strings.HasPrefix(start, date+"T13:00:00") || !strings.HasPrefix(end, date+"T16:00:00") {
		t.Fatalf("dragging 13:00 to 15:45 should pick 13:00–16:00; the form holds %s – %s", start, end)
	}
	run(t, ctx, "book the drag", chromedp.Click(css("#book-submit")))
	waitText(t, ctx, "#book-ok", "13:00 to 16:00", 10*time.Second)

	// The keyboard alone: Enter on the 16:00 slot picks an hour; Enter on Book books.
	run(t, ctx, "Enter on 16:00", chromedp.SendKeys(css(slot("16:00")), "\r"))
	waitText(t, ctx, "#panel-heading", "Book this range", 5*time.Second)
	if f := eval[string](t, ctx, "focus", `document.activeElement.id`); f != "book-kind" {
		t.Fatalf("after picking a range the focus should move into the form, not %q", f)
	}
	run(t, ctx, "Enter on Book", chromedp.SendKeys(css("#book-submit"), "\r"))
	waitText(t, ctx, "#book-ok", "16:00 to 17:00", 10*time.Second)
	screenshot(t, ctx, "calendar-dragged")

	// Extend the afternoon booking by half an hour, then cancel the 16:00 one.
	block := func(hhmm string) string { return `.block.mine[data-start^="` + date + "T" + hhmm + `"]` }
	run(t, ctx, "open 13:00", chromedp.Click(css(block("13:00"))))
	waitText(t, ctx, "#panel-heading", "Your booking", 5*time.Second)
	// 16:00–17:00 is taken by the other booking: extending to 16:30 overlaps it.
	run(t, ctx, "extend into the next booking", chromedp.Click(css("#book-extend")))
	waitText(t, ctx, "#book-error", "overlaps", 10*time.Second)
	run(t, ctx, "open 16:00", chromedp.Click(css(block("16:00"))), chromedp.SendKeys(css("#book-reason"), "sample not ready"),
		chromedp.Click(css("#book-cancel")))
	waitText(t, ctx, "#book-ok", "Cancelled.", 10*time.Second)
	deadline := time.Now().Add(10 * time.Second)
	for eval[int](t, ctx, "blocks", `document.querySelectorAll('`+block("16:00")+`').length`) != 0 {
		if time.Now().After(deadline) {
			t.Fatal("the cancelled booking is still drawn")
		}
		time.Sleep(100 * time.Millisecond)
	}
	run(t, ctx, "open 13:00 again", chromedp.Click(css(block("13:00"))), chromedp.Click(css("#book-extend")))
	waitText(t, ctx, "#book-ok", "Extended to", 10*time.Second)
	waitText(t, ctx, block("13:00"), "13:00–16:30", 10*time.Second)
	screenshot(t, ctx, "calendar-extended")
}
