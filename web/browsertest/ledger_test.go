package browsertest

import (
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"beamledger/accounts"
)

// TestLedgerCheckpoints: the manager signs a checkpoint from the ledger page, and
// every checkpoint's Ed25519 signature checks in the browser with the facility's
// verifier key.
func TestLedgerCheckpoints(t *testing.T) {
	s := newSite(t)
	ctx := newBrowser(t)
	s.signIn(t, ctx, accounts.RoleManager)
	run(t, ctx, "open the ledger", chromedp.Navigate(s.url+"/ledger"), chromedp.WaitVisible(css("#led-sign")))
	waitText(t, ctx, "#led-list tbody", "No checkpoint signed yet", 10*time.Second)
	run(t, ctx, "sign one", chromedp.Click(css("#led-sign")))
	waitText(t, ctx, "#led-list tbody", "valid, by ", 10*time.Second)
	states := eval[string](t, ctx, "signature states", `Array.from(document.querySelectorAll("#led-list td.sig")).map(td => td.textContent).join("|")`)
	for _, st := range strings.Split(states, "|") {
		if !strings.HasPrefix(st, "valid, by ") {
			t.Fatalf("a checkpoint's signature: %q (all: %q)", st, states)
		}
	}
	waitText(t, ctx, "#led-head", "events sealed", time.Second)
	screenshot(t, ctx, "ledger")
}
