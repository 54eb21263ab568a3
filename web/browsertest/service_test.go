package browsertest

import (
	"net/http"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"beamledger/accounts"
)

// TestServiceWindowDisplaces: a researcher holds an hour on the TEM; staff book
// service time over it on the service page (an end before the start is refused
// naming the field), and the window is listed with the researcher's booking under it,
// with a way to find them other time.
func TestServiceWindowDisplaces(t *testing.T) {
	s := newSite(t)
	var ins struct {
		Items []struct{ ID, Code string } `json:"items"`
	}
	s.api(t, accounts.RoleResearcher, http.MethodGet, "/api/v1/instruments", nil, &ins)
	var projects struct {
		Items []struct{ ID, Code string } `json:"items"`
	}
	s.api(t, accounts.RoleResearcher, http.MethodGet, "/api/v1/projects", nil, &projects)
	tem, project := "", ""
	for _, i := range ins.Items {
		if i.Code == "TEM-200" {
			tem = i.ID
		}
	}
	for _, p := range projects.Items {
		if p.Code == "SSB-INTERFACE" {
			project = p.ID
		}
	}
	// A Wednesday three weeks on: inside the horizon, clear of the demo week.
	day := time.Now().AddDate(0, 0, 21)
	for day.Weekday() != time.Wednesday {
		day = day.AddDate(0, 0, 1)
	}
	date := day.Format(time.DateOnly)
	if code := s.api(t, accounts.RoleResearcher, http.MethodPost, "/api/v1/bookings", map[string]string{"instrument_id": tem, "project_id": project,
		"kind": "independent", "start": date + "T10:00", "end": date + "T11:00"}, nil); code != http.StatusCreated {
		t.Fatalf("the researcher's booking: %d", code)
	}

	ctx := newBrowser(t)
	s.signIn(t, ctx, accounts.RoleStaff)
	run(t, ctx, "open service", chromedp.Navigate(s.url+"/service"), chromedp.WaitVisible(css("#svc-form")))
	// The demo week books the STEM's corrector tuning as service time (demo/week.go).
	if got := text(t, ctx, "#service-windows"); !strings.Contains(got, "corrector tuning and detector calibration") {
		t.Fatalf("the demo's service windows are not listed: %q", got)
	}
	run(t, ctx, "choose the TEM", chromedp.SetValue(css("#svc-instrument"), tem), chromedp.SetValue(css("#svc-start"), date+"T12:00"),
		chromedp.SetValue(css("#svc-end"), date+"T09:00"), retype("#svc-note", "goniometer repair"), chromedp.Click(css("#svc-book")))
	waitText(t, ctx, "#svc-error", "end", 10*time.Second)
	run(t, ctx, "the right way round", chromedp.SetValue(css("#svc-start"), date+"T09:00"), chromedp.SetValue(css("#svc-end"), date+"T12:00"),
		chromedp.Click(css("#svc-book")))
	waitText(t, ctx, "#svc-ok", "1 booking displaced", 10*time.Second)
	if got := text(t, ctx, "#svc-error"); got != "" {
		t.Fatalf("an error stays beside a booked window: %q", got)
	}
	win := `#service-windows .service-window:has(.displaced)`
	waitText(t, ctx, win, "goniometer repair", 10*time.Second)
	got := waitText(t, ctx, win+" table.displaced", "Priya Okonkwo", 10*time.Second)
	if !strings.Contains(got, "SSB-INTERFACE") || !strings.Contains(got, "10:00–11:00") {
		t.Fatalf("the displaced booking should show its time and project: %q", got)
	}
	href := eval[string](t, ctx, "rebook link", `document.querySelector("`+win+` a.rebook").getAttribute("href")`)
	if !strings.Contains(href, "instrument="+tem) || !strings.Contains(href, "date="+date) {
		t.Fatalf("the rebook link should open the TEM's calendar at the day: %q", href)
	}
	screenshot(t, ctx, "service")
}
