package browsertest

import (
	"crypto/sha256"
	"encoding/hex"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"beamledger/accounts"
)

// TestSignInEachRole signs in and out as every role of the demo facility: the
// overview names the person and role, and signing out ends the session (the
// overview sends the browser back to the sign-in page).
func TestSignInEachRole(t *testing.T) {
	s := newSite(t)
	ctx := newBrowser(t)
	for _, role := range []accounts.Role{accounts.RoleManager, accounts.RoleStaff, accounts.RoleResearcher, accounts.RoleAuditor} {
		s.signIn(t, ctx, role)
		if got := text(t, ctx, "#viewer-role"); got != string(role) {
			t.Fatalf("signed in as %s, the page says the role is %q", role, got)
		}
		if got := text(t, ctx, "#h-quals"); got != "Qualifications" {
			t.Fatalf("the overview lacks its qualifications section: %q", got)
		}
		if role == accounts.RoleResearcher {
			// The demo researcher holds two qualifications and belongs to two projects.
			waitText(t, ctx, "#my-qualifications", "STEM-CORR", time.Second)
			waitText(t, ctx, "#my-projects", "SSB-INTERFACE", time.Second)
			waitText(t, ctx, "#share-table", "SSB-INTERFACE", 10*time.Second)
		}
		screenshot(t, ctx, "overview-"+string(role))
		run(t, ctx, "sign out", chromedp.Click(css("#sign-out")), chromedp.WaitVisible(css("#sign-in-form")))
		run(t, ctx, "overview after signing out", chromedp.Navigate(s.url+"/"), chromedp.WaitVisible(css("#sign-in-form")))
	}
	screenshot(t, ctx, "sign-in")
	// A wrong password is refused on the form itself.
	run(t, ctx, "wrong password",
		chromedp.SendKeys(css("#email"), s.accounts[accounts.RoleResearcher].Email),
		chromedp.SendKeys(css("#password"), "not the password"),
		chromedp.Click(css(`#sign-in-form button[type="submit"]`)))
	waitText(t, ctx, "#sign-in-error", "email or password is wrong", 5*time.Second)
}

// TestBookByClickingAndConflict books an hour by clicking an empty slot of an
// instrument's day, sees it drawn as the user's own, then clicks the slot half an
// hour earlier, whose hour overlaps it, and sees the conflict reported in the panel
// with the offer to join the waitlist.
func TestBookByClickingAndConflict(t *testing.T) {
	s := newSite(t)
	ctx := newBrowser(t)
	s.signIn(t, ctx, accounts.RoleResearcher)
	run(t, ctx, "open the calendar", chromedp.Navigate(s.url+"/calendar"), chromedp.WaitVisible(css("#cal-instrument")))
	tem := eval[string](t, ctx, "find the TEM",
		`Array.from(document.querySelectorAll("#cal-instrument option")).find(o => o.textContent.startsWith("TEM-200")).value`)
	// A Wednesday three weeks on: inside the booking horizon, clear of the demo week
	// and its Friday series.
	day := time.Now().AddDate(0, 0, 21)
	for day.Weekday() != time.Wednesday {
		day = day.AddDate(0, 0, 1)
	}
	date := day.Format(time.DateOnly)
	run(t, ctx, "open the TEM's day",
		chromedp.Navigate(s.url+"/calendar?view=day&instrument="+tem+"&date="+date),
		chromedp.WaitVisible(css(".cal-day .slot")))
	screenshot(t, ctx, "calendar-day")
	slot := func(hhmm string) string { return `.slot[data-start^="` + date + "T" + hhmm + `"]` }
	run(t, ctx, "click 10:00", chromedp.Click(css(slot("10:00"))), chromedp.WaitVisible(css("#book-form")))
	start := eval[string](t, ctx, "read the start", `document.querySelector("#book-start").value`)
	end := eval[string](t, ctx, "read the end", `document.querySelector("#book-end").value`)
	if !strings.HasPrefix(start, date+"T10:00:00") || !strings.HasPrefix(end, date+"T11:00:00") {
		t.Fatalf("clicking 10:00 should pick 10:00–11:00; the form holds %s – %s", start, end)
	}
	run(t, ctx, "book it", chromedp.SetValue(css("#book-kind"), "independent"), chromedp.Click(css("#book-submit")))
	waitText(t, ctx, "#book-ok", "Booked: independent, "+day.Format("Mon 2 Jan")+", 10:00 to 11:00.", 10*time.Second)
	waitText(t, ctx, `.block.mine[data-start^="`+date+`T10:00"]`, "10:00–11:00", 10*time.Second)
	screenshot(t, ctx, "calendar-booked")

	run(t, ctx, "click 09:30", chromedp.Click(css(slot("09:30"))), chromedp.Click(css("#book-submit")))
	waitText(t, ctx, "#book-error", "overlaps", 10*time.Second)
	if !eval[bool](t, ctx, "waitlist offer", `!document.querySelector("#book-waitlist").hidden`) {
		t.Fatal("a conflict should offer to join the waitlist for the range")
	}
	if got := text(t, ctx, "#book-ok"); got != "" {
		t.Fatalf("a refused booking must not say it was booked: %q", got)
	}
	screenshot(t, ctx, "calendar-conflict")

	run(t, ctx, "week and facility views",
		chromedp.Click(css(`.cal-views a[href*="view=week"]`)), chromedp.WaitVisible(css(".cal-week")))
	screenshot(t, ctx, "calendar-week")
	run(t, ctx, "facility view",
		chromedp.Click(css(`.cal-views a[href*="view=facility"]`)), chromedp.WaitVisible(css(".cal-facility")))
	screenshot(t, ctx, "calendar-facility")
}

// TestAcquisitionPreview types operating conditions into the acquisition form and
// watches the derived quantities follow, then records the acquisition.
func TestAcquisitionPreview(t *testing.T) {
	s := newSite(t)
	ctx := newBrowser(t)
	s.signIn(t, ctx, accounts.RoleResearcher)
	run(t, ctx, "open the form", chromedp.Navigate(s.url+"/acquire"), chromedp.WaitVisible(css("#acq-form")))
	eval[bool](t, ctx, "choose a STEM booking", `(() => { const s = document.querySelector("#acq-booking");
		s.value = Array.from(s.options).find(o => o.textContent.startsWith("STEM-CORR")).value; s.dispatchEvent(new Event("change")); return true; })()`)
	waitText(t, ctx, "#c-voltage", "300 kV", 10*time.Second)
	if !strings.Contains(text(t, ctx, "#safety-note"), "never replace") {
		t.Fatal("the form must say that its warnings support, and never replace, the facility's safety training and rules")
	}
	if v := eval[string](t, ctx, "read the voltage", `document.querySelector("#c-voltage").value`); v != "300 kV" {
		t.Fatalf("the form should start at the voltage of the latest tuning, 300 kV; it shows %q", v)
	}
	run(t, ctx, "type the scan",
		retype("#c-current", "50 pA"),
		retype("#c-dwell", "2 µs"),
		retype("#c-pixel", "0.1 Å"))
	// λ at 300 kV is 1.9687 pm [published: Williams & Carter, Transmission Electron
	// Microscopy, table 1.1: 0.00197 nm]; fluence I·τ/(e·Δx²) = 50 pA · 2 µs /
	// (1.602176634e-19 C · 0.01 Å²) = 62 415 e⁻/Å² [computed: CODATA 2018 exact e].
	waitText(t, ctx, "#d-wavelength", "1.969 pm", 10*time.Second)
	waitText(t, ctx, "#d-fluence", "62420 e⁻/Å²", 10*time.Second)
	screenshot(t, ctx, "acquire-preview")
	run(t, ctx, "double the current", retype("#c-current", "100 pA"))
	waitText(t, ctx, "#d-fluence", "124800 e⁻/Å²", 10*time.Second)
	// The demo lamella has already passed its budget of 2.5e5 e⁻/Å².
	eval[bool](t, ctx, "choose the budgeted specimen", `(() => { const s = document.querySelector("#acq-specimen");
		s.value = Array.from(s.options).find(o => o.textContent.startsWith("SSB-L3")).value; s.dispatchEvent(new Event("change")); return true; })()`)
	waitText(t, ctx, "#d-warnings", "fluence budget", 10*time.Second)
	run(t, ctx, "a bad unit", retype("#c-dwell", "2 mA"))
	waitText(t, ctx, "#preview-state", "dwell_time", 10*time.Second)
	run(t, ctx, "fix it and record", retype("#c-dwell", "2 µs"),
		chromedp.Click(css("#acq-submit")))
	waitText(t, ctx, "#acq-ok", "Recorded (version 1)", 10*time.Second)
	screenshot(t, ctx, "acquire-recorded")
}

// TestUploadProgressAndDigest drops a file on the files page through the resumable
// upload and sees its progress reach 100 %, a rate, and its SHA-256 confirmed by the
// server; then draws a demo file's lineage.
func TestUploadProgressAndDigest(t *testing.T) {
	s := newSite(t)
	ctx := newBrowser(t)
	s.signIn(t, ctx, accounts.RoleResearcher)
	data := make([]byte, 3<<20+17)
	for i := range data {
		data[i] = byte(i*7 + i>>11)
	}
	path := filepath.Join(t.TempDir(), "interface-scan.raw")
	if err := os.WriteFile(path, data, 0o644); err != nil {
		t.Fatal(err)
	}
	sum := sha256.Sum256(data)
	want := hex.EncodeToString(sum[:])
	run(t, ctx, "open the files page", chromedp.Navigate(s.url+"/files"), chromedp.WaitVisible(css("#upload-form")))
	waitText(t, ctx, "#file-list tbody", "", 5*time.Second)
	run(t, ctx, "choose the file", chromedp.SetUploadFiles(css("#up-files"), []string{path}))
	waitText(t, ctx, "#uploads .upload.done .up-status", "stored · 100 %", 30*time.Second)
	if progress := eval[float64](t, ctx, "read the bar", `document.querySelector("#uploads .upload progress").value`); progress != 100 {
		t.Fatalf("the progress bar ends at %v, not 100", progress)
	}
	if r := text(t, ctx, "#uploads .upload .up-rate"); !strings.Contains(r, "/s") || !strings.Contains(r, "left") {
		t.Fatalf("the upload should show its rate and time left: %q", r)
	}
	waitText(t, ctx, "#uploads .upload .sha", want+" (computed here, confirmed by the server)", 5*time.Second)
	waitText(t, ctx, "#file-list tbody", "interface-scan.raw", 10*time.Second)
	screenshot(t, ctx, "files-uploaded")
	// The demo's virtual ADF image was derived from its 4D scan.
	eval[bool](t, ctx, "draw a lineage", `(() => { const rows = Array.from(document.querySelectorAll("#file-list tbody tr"));
		const r = rows.find(r => r.textContent.includes("virtual")) || rows[0]; r.querySelector("button").click(); return true; })()`)
	run(t, ctx, "wait for the lineage", chromedp.WaitVisible(css("#lineage svg")))
	screenshot(t, ctx, "files-lineage")
}
