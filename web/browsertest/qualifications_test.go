package browsertest

import (
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"beamledger/accounts"
)

// TestGrantAndRevokeQualification: staff grant the second researcher unattended
// standing on the TEM, see a grant without a reason refused beside the form, and
// revoke a qualification only once a reason is given.
func TestGrantAndRevokeQualification(t *testing.T) {
	s := newSite(t)
	ctx := newBrowser(t)
	s.signIn(t, ctx, accounts.RoleStaff)
	run(t, ctx, "open qualifications", chromedp.Navigate(s.url+"/qualifications"), chromedp.WaitVisible(css("#qual-form")))
	if got := text(t, ctx, "#qual-safety"); got == "" || !strings.Contains(got, "never replace") {
		t.Fatalf("the page must say qualifications support, and never replace, safety training: %q", got)
	}
	waitText(t, ctx, "#qual-list tbody", "Mateo Szabo", 10*time.Second)
	pick := func(sel, prefix string) {
		eval[bool](t, ctx, "choose "+prefix, `(() => { const s = document.querySelector("`+sel+`");
			s.value = Array.from(s.options).find(o => o.textContent.startsWith("`+prefix+`")).value; return true; })()`)
	}
	pick("#q-user", "Mateo Szabo")
	pick("#q-instrument", "TEM-200")
	run(t, ctx, "grant without a reason", chromedp.SetValue(css("#q-level"), "unattended"), chromedp.Click(css("#q-grant")))
	waitText(t, ctx, "#q-error", "reason", 10*time.Second)
	run(t, ctx, "grant with a reason", chromedp.SendKeys(css("#q-reason"), "overnight-operation briefing and sign-off"), chromedp.Click(css("#q-grant")))
	waitText(t, ctx, "#q-ok", "Granted: Mateo Szabo (researcher) is unattended on TEM-200.", 10*time.Second)
	screenshot(t, ctx, "qualifications")

	row := `#qual-list tr:has(.level-unattended)`
	before := eval[int](t, ctx, "rows", `document.querySelectorAll("#qual-list tbody tr").length`)
	run(t, ctx, "revoke without a reason", chromedp.Click(css(row+` button`)))
	waitText(t, ctx, "#q-error", "reason", 10*time.Second)
	run(t, ctx, "revoke with a reason", chromedp.SendKeys(css("#q-revoke-reason"), "granted by mistake"), chromedp.Click(css(row+` button`)))
	waitText(t, ctx, "#q-ok", "Revoked.", 10*time.Second)
	if after := eval[int](t, ctx, "rows", `document.querySelectorAll("#qual-list tbody tr").length`); after != before-1 {
		t.Fatalf("%d qualifications in force after revoking one of %d", after, before)
	}
}
