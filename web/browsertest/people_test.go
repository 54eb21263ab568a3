package browsertest

import (
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"beamledger/accounts"
)

// TestPeopleAndAgentTokens: the manager adds a person (a bad email refused beside the
// form), a project led by them, adds and removes a member, then issues an agent token
// for the TEM, sees its secret once, and revokes it; the token signs nothing after.
// The auditor reads the people and projects and sees no agent tokens.
func TestPeopleAndAgentTokens(t *testing.T) {
	s := newSite(t)
	ctx := newBrowser(t)
	s.signIn(t, ctx, accounts.RoleManager)
	run(t, ctx, "open people", chromedp.Navigate(s.url+"/people"), chromedp.WaitVisible(css("#user-form")))
	waitText(t, ctx, `#people-list tr[data-email="researcher2@demo.example"]`, "Mateo Szabo", 10*time.Second)
	// The demo's CERIA-SAC is led by Mateo Szabo with Priya Okonkwo as a member (demo/demo.go).
	waitText(t, ctx, `#project-list tr[data-code="CERIA-SAC"]`, "Mateo Szabo (PI)", 10*time.Second)
	waitText(t, ctx, `#project-list tr[data-code="CERIA-SAC"]`, "external academic", time.Second)

	run(t, ctx, "a person with a bad email", retype("#u-name", "Rowan Ekwueme-Hart"), retype("#u-email", "rowan.at.example"),
		retype("#u-password", "a long first password 1"), chromedp.Click(css("#u-create")))
	waitText(t, ctx, "#u-error", "email", 10*time.Second)
	run(t, ctx, "a good one", retype("#u-email", "rowan@demo.example"), chromedp.Click(css("#u-create")))
	waitText(t, ctx, "#u-ok", "Added Rowan Ekwueme-Hart as researcher.", 10*time.Second)
	waitText(t, ctx, `#people-list tr[data-email="rowan@demo.example"]`, "researcher", 10*time.Second)

	pi := eval[string](t, ctx, "find Rowan", `Array.from(document.querySelectorAll("#p-pi option")).find(o => o.textContent.startsWith("Rowan")).value`)
	run(t, ctx, "a project", retype("#p-code", "GRAIN-EDGE"), retype("#p-title", "Grain-boundary segregation in alloy foils"),
		chromedp.SetValue(css("#p-pi"), pi), chromedp.SetValue(css("#p-rate"), "commercial"), chromedp.Click(css("#p-create")))
	waitText(t, ctx, "#p-ok", "Added GRAIN-EDGE.", 10*time.Second)
	row := `#project-list tr[data-code="GRAIN-EDGE"]`
	waitText(t, ctx, row, "Rowan Ekwueme-Hart (PI)", 10*time.Second)
	eval[bool](t, ctx, "choose Priya", `(() => { const s = document.querySelector('`+row+` .add-member');
		s.value = Array.from(s.options).find(o => o.textContent === "Priya Okonkwo").value; return true; })()`)
	run(t, ctx, "add her", chromedp.Click(css(row+` .add-member + button`)))
	waitText(t, ctx, "#project-ok", "Added Priya Okonkwo to GRAIN-EDGE.", 10*time.Second)
	waitText(t, ctx, row+` ul.members`, "Priya Okonkwo", 10*time.Second)
	run(t, ctx, "remove her", chromedp.Click(css(row+` button[aria-label="Remove Priya Okonkwo from GRAIN-EDGE"]`)))
	waitText(t, ctx, "#project-ok", "Removed Priya Okonkwo from GRAIN-EDGE.", 10*time.Second)
	if got := text(t, ctx, row+` ul.members`); strings.Contains(got, "Priya") {
		t.Fatalf("removed member still listed: %q", got)
	}

	tem := eval[string](t, ctx, "find the TEM", `Array.from(document.querySelectorAll("#t-instrument option")).find(o => o.textContent.startsWith("TEM-200")).value`)
	eval[bool](t, ctx, "choose the TEM", `(() => { const s = document.querySelector("#t-instrument"); s.value = "`+tem+`"; return s.dispatchEvent(new Event("change")); })()`)
	run(t, ctx, "a token without scopes", retype("#t-name", "tem-acquisition-pc"), chromedp.Click(css("#t-issue")))
	waitText(t, ctx, "#t-error", "scopes", 10*time.Second)
	run(t, ctx, "with a scope", chromedp.Click(css(`#token-form input[value="instrument:read"]`)), chromedp.Click(css("#t-issue")))
	waitText(t, ctx, `#token-list tr[data-name="tem-acquisition-pc"]`, "active", 10*time.Second)
	secret := text(t, ctx, "#t-secret-value")
	if !strings.HasPrefix(secret, accounts.AgentTokenPrefix) {
		t.Fatalf("the issued secret is not shown: %q", secret)
	}
	if code := s.call(t, secret, "GET", "/api/v1/instruments/"+tem, nil, nil); code != 200 {
		t.Fatalf("the shown secret does not sign in as the TEM's agent: %d", code)
	}
	screenshot(t, ctx, "people")
	run(t, ctx, "revoke it", chromedp.Click(css(`#token-list tr[data-name="tem-acquisition-pc"] button`)))
	waitText(t, ctx, "#t-list-ok", "Revoked tem-acquisition-pc", 10*time.Second)
	waitText(t, ctx, `#token-list tr[data-name="tem-acquisition-pc"]`, "revoked", 10*time.Second)
	if code := s.call(t, secret, "GET", "/api/v1/instruments/"+tem, nil, nil); code != 401 {
		t.Fatalf("a revoked token still signs in: %d", code)
	}
	run(t, ctx, "reload", chromedp.Navigate(s.url+"/people"), chromedp.WaitVisible(css("#token-list")))
	if got := text(t, ctx, "#t-secret-value"); got != "" {
		t.Fatalf("the secret is shown again after a reload: %q", got)
	}

	aud := newBrowser(t)
	s.signIn(t, aud, accounts.RoleAuditor)
	run(t, aud, "auditor opens people", chromedp.Navigate(s.url+"/people"), chromedp.WaitVisible(css("#project-list")))
	waitText(t, aud, row, "Rowan Ekwueme-Hart (PI)", 10*time.Second)
	if n := eval[int](t, aud, "forms", `document.querySelectorAll("form, #agents, #project-list button").length`); n != 0 {
		t.Fatalf("the auditor reads only, yet sees %d forms, buttons or agent tokens", n)
	}
}
