package browsertest

import (
	"encoding/json"
	"net/http"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"beamledger/accounts"
)

// TestCorrectAcquisition: the researcher opens one of their recorded acquisitions
// under the acquisition form, sees its conditions as recorded, is refused a correction
// without a reason and one with a beam current that is no current (each naming the
// field), then records the right current; the acquisition's history keeps both
// versions, the new one with the reason.
func TestCorrectAcquisition(t *testing.T) {
	s := newSite(t)
	ctx := newBrowser(t)
	s.signIn(t, ctx, accounts.RoleResearcher)
	// From the overview, each recent acquisition of their own links to its correction:
	// the oldest listed opens with it chosen (not merely the form's default), and the
	// newest is the one corrected below.
	run(t, ctx, "open the overview", chromedp.Navigate(s.url+"/"), chromedp.WaitVisible(css("#my-acquisitions a.correct")))
	links := eval[[]string](t, ctx, "correction links", `[...document.querySelectorAll("#my-acquisitions a.correct")].map((a) => a.href)`)
	if len(links) < 2 {
		t.Fatalf("%d correction links on the overview, want the demo's several", len(links))
	}
	run(t, ctx, "follow the oldest", chromedp.Navigate(links[len(links)-1]), chromedp.WaitVisible(css("#cor-form")))
	if id := eval[string](t, ctx, "chosen acquisition", `document.querySelector("#cor-acq").value`); !strings.Contains(links[len(links)-1], "correct="+id) {
		t.Errorf("the link %s opened the form on %s", links[len(links)-1], id)
	}
	run(t, ctx, "follow the newest", chromedp.Navigate(links[0]), chromedp.WaitVisible(css("#cor-form")))
	waitText(t, ctx, "#cor-kept", "Version 1", 10*time.Second)
	id := eval[string](t, ctx, "chosen acquisition", `document.querySelector("#cor-acq").value`)
	if !strings.Contains(links[0], "correct="+id) {
		t.Fatalf("the link %s opened the form on %s", links[0], id)
	}
	if v := eval[string](t, ctx, "voltage", `document.querySelector("#cor-accelerating_voltage").value`); v == "" {
		t.Fatal("the recorded accelerating voltage is not shown")
	}
	run(t, ctx, "no reason", retype("#cor-beam_current", "75 pA"), chromedp.Click(css("#cor-submit")))
	waitText(t, ctx, "#cor-error", "reason", 10*time.Second)
	run(t, ctx, "no current", retype("#cor-beam_current", "75 parsecs"), retype("#cor-reason", "current read from the wrong meter"), chromedp.Click(css("#cor-submit")))
	waitText(t, ctx, "#cor-error", "beam_current", 10*time.Second)
	run(t, ctx, "the right current", retype("#cor-beam_current", "75 pA"), chromedp.Click(css("#cor-submit")))
	waitText(t, ctx, "#cor-ok", "Corrected: version 2 is now in force.", 10*time.Second)
	waitText(t, ctx, "#cor-kept", "Version 2", 10*time.Second)
	screenshot(t, ctx, "acquisition-correction")

	var history struct {
		Items []struct {
			Version    int             `json:"version"`
			Reason     string          `json:"reason"`
			Conditions json.RawMessage `json:"conditions"`
		} `json:"items"`
	}
	if code := s.api(t, accounts.RoleResearcher, http.MethodGet, "/api/v1/acquisitions/"+id+"/versions", nil, &history); code != http.StatusOK {
		t.Fatalf("versions: %d", code)
	}
	if len(history.Items) != 2 {
		t.Fatalf("%d versions after one correction", len(history.Items))
	}
	last := history.Items[len(history.Items)-1]
	var cond struct {
		BeamCurrent struct{ SI float64 } `json:"beam_current"`
	}
	if err := json.Unmarshal(last.Conditions, &cond); err != nil {
		t.Fatal(err)
	}
	// 75 pA is 7.5e-11 A [constructed: the value typed above].
	if last.Version != 2 || last.Reason != "current read from the wrong meter" || cond.BeamCurrent.SI < 7.49e-11 || cond.BeamCurrent.SI > 7.51e-11 {
		t.Fatalf("the new version: %d %q %s", last.Version, last.Reason, last.Conditions)
	}
}
