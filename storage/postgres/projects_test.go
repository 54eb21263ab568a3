package postgres_test

import (
	"context"
	"slices"
	"strings"
	"testing"

	"beamledger"
	"beamledger/accounts"
	"beamledger/storage/postgres"
	"beamledger/storage/postgres/pgtest"
)

const unknownID = "7d1f6c1e-3f0a-4c1e-9a57-2b1d2f0e8c44"

func mustCreateProject(t *testing.T, db *postgres.DB, code, piID string) accounts.Project {
	t.Helper()
	p, err := db.CreateProject(context.Background(), accounts.NewProject{
		Code: code, Title: "Project " + code, PrincipalInvestigatorID: piID, RateClass: accounts.RateInternal,
	})
	if err != nil {
		t.Fatalf("CreateProject(%s): %v", code, err)
	}
	return p
}

// wantInvalidField fails unless err is ErrInvalid naming field.
func wantInvalidField(t *testing.T, err error, field string) {
	t.Helper()
	wantKind(t, err, beamledger.ErrInvalid)
	if e := domainError(t, err); e.Fields[field] == "" {
		t.Errorf("Fields = %v, want a reason for %s", e.Fields, field)
	}
}

func wantMembers(t *testing.T, p accounts.Project, ids ...string) {
	t.Helper()
	got, want := slices.Sorted(slices.Values(p.MemberIDs)), slices.Sorted(slices.Values(ids))
	if !slices.Equal(got, want) {
		t.Errorf("project %s members = %v, want %v", p.Code, got, want)
	}
}

func TestCreateProject(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()
	pi := mustCreateUser(t, db, "pi@example.org", accounts.RoleResearcher)
	p, err := db.CreateProject(ctx, accounts.NewProject{
		Code: "EM-2031-07", Title: "Grain boundaries in SrTiO3", PrincipalInvestigatorID: pi.ID,
		RateClass: accounts.RateExternalAcademic,
	})
	if err != nil {
		t.Fatal(err)
	}
	if !accounts.ValidID(p.ID) || p.Code != "EM-2031-07" || p.Title != "Grain boundaries in SrTiO3" ||
		p.PrincipalInvestigatorID != pi.ID || p.RateClass != accounts.RateExternalAcademic || p.CreatedAt.IsZero() {
		t.Fatalf("created = %+v", p)
	}
	if !slices.Equal(p.MemberIDs, []string{pi.ID}) {
		t.Errorf("members = %v, want only the investigator %s", p.MemberIDs, pi.ID)
	}
	got, err := db.Project(ctx, p.ID)
	if err != nil {
		t.Fatal(err)
	}
	if got.Code != p.Code || got.PrincipalInvestigatorID != pi.ID || !slices.Equal(got.MemberIDs, p.MemberIDs) ||
		!got.CreatedAt.Equal(p.CreatedAt) {
		t.Errorf("Project = %+v, want %+v", got, p)
	}
}

func TestCreateProjectRefusals(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()
	pi := mustCreateUser(t, db, "pi@example.org", accounts.RoleResearcher)
	mustCreateProject(t, db, "EM-01", pi.ID)

	for name, piID := range map[string]string{"unknown": unknownID, "malformed": "pi", "empty": ""} {
		_, err := db.CreateProject(ctx, accounts.NewProject{
			Code: "EM-" + strings.ToUpper(name), Title: "T", PrincipalInvestigatorID: piID, RateClass: accounts.RateInternal,
		})
		wantInvalidField(t, err, "principal_investigator_id")
	}

	_, err := db.CreateProject(ctx, accounts.NewProject{Code: "EM-01", Title: "Again", PrincipalInvestigatorID: pi.ID, RateClass: accounts.RateInternal})
	wantKind(t, err, beamledger.ErrConflict)
	if !strings.Contains(err.Error(), "code is taken") {
		t.Errorf("message %q does not say the code is taken", err)
	}

	// Nothing half-made survives a refusal.
	ps, err := db.Projects(ctx, accounts.ProjectFilter{})
	if err != nil {
		t.Fatal(err)
	}
	if len(ps) != 1 || ps[0].Code != "EM-01" || ps[0].Title != "Project EM-01" {
		t.Errorf("Projects = %+v, want only the first EM-01", ps)
	}
}

func TestProjectNotFound(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()
	u := mustCreateUser(t, db, "u@example.org", accounts.RoleResearcher)
	for _, id := range []string{unknownID, "not-a-uuid", ""} {
		_, err := db.Project(ctx, id)
		wantKind(t, err, beamledger.ErrNotFound)
		_, err = db.UpdateProject(ctx, id, accounts.ProjectPatch{Title: ptr("T")})
		wantKind(t, err, beamledger.ErrNotFound)
		_, err = db.AddMember(ctx, id, u.ID)
		wantKind(t, err, beamledger.ErrNotFound)
		_, err = db.RemoveMember(ctx, id, u.ID)
		wantKind(t, err, beamledger.ErrNotFound)
	}
}

func TestProjectMembers(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()
	pi := mustCreateUser(t, db, "pi@example.org", accounts.RoleResearcher)
	student := mustCreateUser(t, db, "student@example.org", accounts.RoleResearcher)
	outsider := mustCreateUser(t, db, "outsider@example.org", accounts.RoleResearcher)
	p := mustCreateProject(t, db, "EM-01", pi.ID)

	for range 2 { // adding twice is the same as adding once
		got, err := db.AddMember(ctx, p.ID, student.ID)
		if err != nil {
			t.Fatal(err)
		}
		wantMembers(t, got, pi.ID, student.ID)
	}

	_, err := db.AddMember(ctx, p.ID, unknownID)
	wantInvalidField(t, err, "user_id")
	_, err = db.AddMember(ctx, p.ID, "nobody")
	wantInvalidField(t, err, "user_id")

	_, err = db.RemoveMember(ctx, p.ID, pi.ID)
	wantKind(t, err, beamledger.ErrConflict)
	_, err = db.RemoveMember(ctx, p.ID, outsider.ID)
	wantKind(t, err, beamledger.ErrNotFound)
	_, err = db.RemoveMember(ctx, p.ID, unknownID)
	wantKind(t, err, beamledger.ErrNotFound)

	got, err := db.RemoveMember(ctx, p.ID, student.ID)
	if err != nil {
		t.Fatal(err)
	}
	wantMembers(t, got, pi.ID)
	_, err = db.RemoveMember(ctx, p.ID, student.ID)
	wantKind(t, err, beamledger.ErrNotFound)
	if got, err = db.Project(ctx, p.ID); err != nil {
		t.Fatal(err)
	}
	wantMembers(t, got, pi.ID)
}

func TestProjectsFilterByMember(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()
	ann := mustCreateUser(t, db, "ann@example.org", accounts.RoleResearcher)
	bea := mustCreateUser(t, db, "bea@example.org", accounts.RoleResearcher)
	loner := mustCreateUser(t, db, "loner@example.org", accounts.RoleResearcher)
	// Created out of code order, so the listing's order is the query's doing.
	zeta := mustCreateProject(t, db, "ZETA", ann.ID)
	alpha := mustCreateProject(t, db, "ALPHA", bea.ID)
	mid := mustCreateProject(t, db, "MID", bea.ID)
	if _, err := db.AddMember(ctx, mid.ID, ann.ID); err != nil {
		t.Fatal(err)
	}
	tests := []struct {
		name   string
		member string
		want   []string
	}{
		{"everyone", "", []string{alpha.ID, mid.ID, zeta.ID}},
		{"investigator and member", ann.ID, []string{mid.ID, zeta.ID}},
		{"investigator only", bea.ID, []string{alpha.ID, mid.ID}},
		{"member of nothing", loner.ID, nil},
		{"unknown user", unknownID, nil},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			t.Parallel()
			ps, err := db.Projects(ctx, accounts.ProjectFilter{MemberID: tt.member})
			if err != nil {
				t.Fatal(err)
			}
			var ids []string
			for _, p := range ps {
				ids = append(ids, p.ID)
			}
			if !slices.Equal(ids, tt.want) {
				t.Errorf("Projects(member %s) = %v, want %v", tt.member, ids, tt.want)
			}
		})
	}
}

func TestUpdateProject(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()
	pi := mustCreateUser(t, db, "pi@example.org", accounts.RoleResearcher)
	next := mustCreateUser(t, db, "next@example.org", accounts.RoleResearcher)
	p := mustCreateProject(t, db, "EM-01", pi.ID)

	same, err := db.UpdateProject(ctx, p.ID, accounts.ProjectPatch{})
	if err != nil {
		t.Fatal(err)
	}
	if same.Title != p.Title || same.PrincipalInvestigatorID != pi.ID || same.RateClass != p.RateClass {
		t.Fatalf("empty patch changed %+v into %+v", p, same)
	}

	got, err := db.UpdateProject(ctx, p.ID, accounts.ProjectPatch{Title: ptr("New title"), RateClass: ptr(accounts.RateCommercial)})
	if err != nil {
		t.Fatal(err)
	}
	if got.Title != "New title" || got.RateClass != accounts.RateCommercial || got.PrincipalInvestigatorID != pi.ID || got.Code != "EM-01" {
		t.Fatalf("after title and rate change: %+v", got)
	}

	got, err = db.UpdateProject(ctx, p.ID, accounts.ProjectPatch{PrincipalInvestigatorID: ptr(next.ID)})
	if err != nil {
		t.Fatal(err)
	}
	if got.PrincipalInvestigatorID != next.ID || got.Title != "New title" || got.RateClass != accounts.RateCommercial {
		t.Fatalf("after investigator change: %+v", got)
	}
	// The new investigator joins; the old one stays a member until removed.
	wantMembers(t, got, pi.ID, next.ID)
	if got, err = db.RemoveMember(ctx, p.ID, pi.ID); err != nil {
		t.Fatalf("removing the former investigator: %v", err)
	}
	wantMembers(t, got, next.ID)
	_, err = db.RemoveMember(ctx, p.ID, next.ID)
	wantKind(t, err, beamledger.ErrConflict)

	for _, bad := range []string{unknownID, "nobody"} {
		_, err = db.UpdateProject(ctx, p.ID, accounts.ProjectPatch{PrincipalInvestigatorID: ptr(bad), Title: ptr("Lost")})
		wantInvalidField(t, err, "principal_investigator_id")
	}
	if got, err = db.Project(ctx, p.ID); err != nil || got.Title != "New title" || got.PrincipalInvestigatorID != next.ID {
		t.Errorf("after refused updates: %+v, %v", got, err)
	}
}
