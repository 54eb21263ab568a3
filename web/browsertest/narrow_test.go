package browsertest

import (
	"testing"

	"github.com/chromedp/chromedp"

	"beamledger/accounts"
)

// TestNarrowScreen opens the main pages 390 px wide, as on a phone beside the
// microscope: nothing may run off the side of the page (the calendar grid scrolls
// inside its own box), and the controls stay reachable.
func TestNarrowScreen(t *testing.T) {
	s := newSite(t)
	ctx := newBrowser(t)
	run(t, ctx, "narrow window", chromedp.EmulateViewport(390, 844))
	s.signIn(t, ctx, accounts.RoleResearcher)
	for _, p := range []struct{ path, ready, name string }{
		{"/", "#my-projects", "overview"},
		{"/calendar?view=day", ".cal-day .slot", "calendar"},
		{"/acquire", "#acq-submit", "acquire"},
		{"/files", "#drop", "files"},
		{"/trace", "#trace-form", "trace"},
		{"/statements", "#st-project", "statements"},
	} {
		run(t, ctx, "open "+p.path, chromedp.Navigate(s.url+p.path), chromedp.WaitVisible(css(p.ready)))
		if w := eval[int](t, ctx, "page width", `document.documentElement.scrollWidth`); w > 390 {
			t.Errorf("%s is %d px wide at a 390 px window", p.path, w)
		}
		screenshot(t, ctx, "narrow-"+p.name)
	}
}
