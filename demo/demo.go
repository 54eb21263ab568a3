// Package demo loads the demo facility that `make run` serves: an invented
// electron-microscopy centre with instruments, projects and one account per role.
// Every name here is made up for the demo; nothing describes a real institution,
// person or product. Loading is idempotent: a second run finds what exists and adds
// only what is missing.
package demo

import (
	"context"
	"crypto/hmac"
	"crypto/sha256"
	"encoding/base64"
	"errors"
	"fmt"
	"time"

	"beamledger"
	"beamledger/accounts"
	"beamledger/scheduling"
)

// Stores is what loading needs from storage.
type Stores interface {
	accounts.UserStore
	accounts.ProjectStore
	scheduling.InstrumentStore
	scheduling.FacilityStore
}

// Account is a demo sign-in, printed by `make run`.
type Account struct {
	Role     accounts.Role
	Email    string
	Password string
}

// Facility is the demo facility.
var Facility = scheduling.Facility{Name: "Kestrel Ridge Electron Microscopy Centre", TimeZone: "Europe/Berlin", Currency: "EUR"}

type person struct {
	email, name string
	role        accounts.Role
}

// people: one per role, plus a second researcher so that projects differ in membership.
var people = []person{
	{"manager@demo.example", "Imogen Varga", accounts.RoleManager},
	{"staff@demo.example", "Tobias Lindqvist-Achebe", accounts.RoleStaff},
	{"researcher@demo.example", "Priya Okonkwo", accounts.RoleResearcher},
	{"auditor@demo.example", "Hal Brennerman", accounts.RoleAuditor},
	{"researcher2@demo.example", "Mateo Szabo", accounts.RoleResearcher},
}

func radius(m float64) *float64 { return &m }

// instruments of the demo: a probe-corrected STEM, a TEM and a dual-beam tool, plus a
// plasma cleaner to show that not every bookable tool is a microscope. Detector radii
// are invented, in metres.
var instruments = []scheduling.Instrument{
	{
		Code: "STEM-CORR", Name: "Probe-corrected STEM, 60–300 kV", Kind: scheduling.KindSTEM, Location: "Hall B, room 014",
		Bookable: true, AcceleratingVoltagesV: []float64{60e3, 80e3, 200e3, 300e3}, Corrector: scheduling.CorrectorProbe,
		Detectors: []scheduling.Detector{
			{Name: "BF", Kind: scheduling.DetectorAnnular, InnerRadiusM: radius(0), OuterRadiusM: radius(1.5e-3)},
			{Name: "ABF", Kind: scheduling.DetectorAnnular, InnerRadiusM: radius(0.9e-3), OuterRadiusM: radius(1.8e-3)},
			{Name: "ADF", Kind: scheduling.DetectorAnnular, InnerRadiusM: radius(2.4e-3), OuterRadiusM: radius(7.2e-3)},
			{Name: "HAADF", Kind: scheduling.DetectorAnnular, InnerRadiusM: radius(4.8e-3), OuterRadiusM: radius(16e-3)},
			{Name: "PIXEL-4D", Kind: scheduling.DetectorPixelated, InnerRadiusM: radius(0), OuterRadiusM: radius(7.5e-3)},
			{Name: "EELS", Kind: scheduling.DetectorSpectrometer},
		},
	},
	{
		Code: "TEM-200", Name: "200 kV TEM", Kind: scheduling.KindTEM, Location: "Hall B, room 017",
		Bookable: true, AcceleratingVoltagesV: []float64{80e3, 120e3, 200e3}, Corrector: scheduling.CorrectorNone,
		Detectors: []scheduling.Detector{{Name: "CAMERA", Kind: scheduling.DetectorCamera}},
	},
	{
		Code: "FIB-SEM", Name: "Dual-beam FIB-SEM", Kind: scheduling.KindFIB, Location: "Hall C, room 102",
		Bookable: true, AcceleratingVoltagesV: []float64{1e3, 2e3, 5e3, 10e3, 15e3, 30e3}, Corrector: scheduling.CorrectorNone,
		Detectors: []scheduling.Detector{{Name: "SE", Kind: scheduling.DetectorSecondary}, {Name: "BSE", Kind: scheduling.DetectorBackscatter}},
	},
	{
		Code: "PLASMA", Name: "Specimen plasma cleaner", Kind: scheduling.KindOther, Location: "Hall B, prep room",
		Bookable: true, Corrector: scheduling.CorrectorNone,
	},
}

type project struct {
	code, title string
	pi          string // email
	members     []string
	rate        accounts.RateClass
}

var projects = []project{
	{"SSB-INTERFACE", "Buried interfaces in solid-state battery cathodes", "researcher@demo.example", nil, accounts.RateInternal},
	{"CERIA-SAC", "Single-atom catalysts on ceria nanorods", "researcher2@demo.example", []string{"researcher@demo.example"}, accounts.RateExternalAcademic},
	{"MEMBRANE-QC", "Defect survey of filtration membranes (contract)", "researcher2@demo.example", nil, accounts.RateCommercial},
}

// Load creates whatever of the demo facility is missing and returns the accounts with
// their passwords. Passwords derive from secret (kept per checkout), so they are not
// written in the code and stay the same from run to run; a demo account whose
// password was changed is set back to the printed one. The instruments it makes are
// recorded in the ledger at now, by the demo manager.
func Load(ctx context.Context, st Stores, hasher *accounts.PasswordHasher, secret []byte, now time.Time) ([]Account, error) {
	if _, err := st.Facility(ctx); errors.Is(err, beamledger.ErrNotFound) {
		if _, err := st.SetFacility(ctx, Facility); err != nil {
			return nil, fmt.Errorf("demo facility: %w", err)
		}
	} else if err != nil {
		return nil, err
	}
	ids := map[string]string{}
	var out []Account
	for _, p := range people {
		pw := Password(secret, p.email)
		id, err := ensureUser(ctx, st, hasher, p, pw)
		if err != nil {
			return nil, fmt.Errorf("demo user %s: %w", p.email, err)
		}
		ids[p.email] = id
		out = append(out, Account{Role: p.role, Email: p.email, Password: pw})
	}
	for _, in := range instruments {
		if _, err := st.InstrumentByCode(ctx, in.Code); errors.Is(err, beamledger.ErrNotFound) {
			if err := in.Normalize(); err != nil {
				return nil, fmt.Errorf("demo instrument %s: %w", in.Code, err)
			}
			if _, err := st.CreateInstrument(ctx, in, ids["manager@demo.example"], now); err != nil {
				return nil, fmt.Errorf("demo instrument %s: %w", in.Code, err)
			}
		} else if err != nil {
			return nil, err
		}
	}
	if err := ensureProjects(ctx, st, ids); err != nil {
		return nil, err
	}
	return out, nil
}

func ensureUser(ctx context.Context, st Stores, hasher *accounts.PasswordHasher, p person, pw string) (string, error) {
	cred, err := st.CredentialsByEmail(ctx, p.email)
	if errors.Is(err, beamledger.ErrNotFound) {
		h, err := hasher.Hash(ctx, pw)
		if err != nil {
			return "", err
		}
		u, err := st.CreateUser(ctx, accounts.NewUser{Email: p.email, DisplayName: p.name, Role: p.role}, h)
		return u.ID, err
	}
	if err != nil {
		return "", err
	}
	ok, _, err := hasher.Verify(ctx, pw, cred.PasswordHash)
	if err != nil || !ok {
		h, err := hasher.Hash(ctx, pw)
		if err != nil {
			return "", err
		}
		if err := st.SetPasswordHash(ctx, cred.User.ID, h, true); err != nil {
			return "", err
		}
	}
	return cred.User.ID, nil
}

func ensureProjects(ctx context.Context, st Stores, ids map[string]string) error {
	existing, err := st.Projects(ctx, accounts.ProjectFilter{})
	if err != nil {
		return err
	}
	have := map[string]bool{}
	for _, p := range existing {
		have[p.Code] = true
	}
	for _, p := range projects {
		if have[p.code] {
			continue
		}
		created, err := st.CreateProject(ctx, accounts.NewProject{Code: p.code, Title: p.title, PrincipalInvestigatorID: ids[p.pi], RateClass: p.rate})
		if err != nil {
			return fmt.Errorf("demo project %s: %w", p.code, err)
		}
		for _, m := range p.members {
			if _, err := st.AddMember(ctx, created.ID, ids[m]); err != nil {
				return fmt.Errorf("demo project %s: %w", p.code, err)
			}
		}
	}
	return nil
}

// Password derives a demo account's password from the per-checkout secret.
func Password(secret []byte, email string) string {
	mac := hmac.New(sha256.New, secret)
	mac.Write([]byte(email))
	return base64.RawURLEncoding.EncodeToString(mac.Sum(nil))[:16]
}
