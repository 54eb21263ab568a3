package postgres_test

import (
	"context"
	"errors"
	"slices"
	"strings"
	"testing"
	"time"

	"beamledger"
	"beamledger/accounts"
	"beamledger/storage/postgres/pgtest"
)

func TestCreateUserRoundTrip(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()

	created, err := db.CreateUser(ctx, accounts.NewUser{
		Email: "ann@example.org", DisplayName: "Ann Lee", ORCID: "0000-0002-1825-0097", Role: accounts.RoleStaff,
	}, "$argon2id$stand-in")
	if err != nil {
		t.Fatal(err)
	}
	if !accounts.ValidID(created.ID) || created.Email != "ann@example.org" || created.DisplayName != "Ann Lee" ||
		created.ORCID != "0000-0002-1825-0097" || created.Role != accounts.RoleStaff || created.Disabled ||
		created.CreatedAt.IsZero() {
		t.Fatalf("created = %+v", created)
	}
	got, err := db.User(ctx, created.ID)
	if err != nil {
		t.Fatal(err)
	}
	if got != created {
		t.Errorf("User = %+v, want %+v", got, created)
	}
	cred, err := db.CredentialsByEmail(ctx, "ann@example.org")
	if err != nil {
		t.Fatal(err)
	}
	if cred.User != created || cred.PasswordHash != "$argon2id$stand-in" {
		t.Errorf("CredentialsByEmail = %+v", cred)
	}
	st, err := db.AuthState(ctx, created.ID)
	if err != nil {
		t.Fatal(err)
	}
	if st != (accounts.AuthState{Role: accounts.RoleStaff, TokenVersion: 1}) {
		t.Errorf("AuthState = %+v", st)
	}
}

func TestCreateUserEmailTakenRegardlessOfCase(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()
	mustCreateUser(t, db, "ann@example.org", accounts.RoleResearcher)

	email, err := accounts.NormalizeEmail("  Ann@Example.ORG ")
	if err != nil {
		t.Fatal(err)
	}
	_, err = db.CreateUser(ctx, accounts.NewUser{Email: email, DisplayName: "Ann again", Role: accounts.RoleStaff}, "")
	wantKind(t, err, beamledger.ErrConflict)
	if !strings.Contains(err.Error(), "email is taken") {
		t.Errorf("message %q does not say the email is taken", err)
	}
}

// The store does not normalise; the schema refuses what NormalizeEmail would have fixed,
// so a caller that forgets to normalise cannot create a second spelling of an account.
func TestCreateUserUpperCaseEmailRefusedBySchema(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()
	_, err := db.CreateUser(ctx, accounts.NewUser{Email: "Bob@Example.org", DisplayName: "Bob", Role: accounts.RoleStaff}, "")
	wantKind(t, err, beamledger.ErrInvalid)
	all, err := db.Users(ctx, accounts.UserFilter{IncludeDisabled: true})
	if err != nil {
		t.Fatal(err)
	}
	if len(all) != 0 {
		t.Errorf("Users = %+v, want none stored", all)
	}
}

func TestUserLookupsOfUnknownIDs(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()
	u := mustCreateUser(t, db, "ann@example.org", accounts.RoleStaff)
	ids := map[string]string{
		"unknown":    "7d1f6c1e-3f0a-4c1e-9a57-2b1d2f0e8c44",
		"malformed":  "not-a-uuid",
		"empty":      "",
		"upper case": strings.ToUpper(u.ID), // ids are lower-case UUIDs; no second spelling
		"injection":  "' OR true --",
	}
	for name, id := range ids {
		t.Run(name, func(t *testing.T) {
			t.Parallel()
			_, err := db.User(ctx, id)
			wantKind(t, err, beamledger.ErrNotFound)
			_, err = db.AuthState(ctx, id)
			wantKind(t, err, beamledger.ErrNotFound)
			_, err = db.UpdateUser(ctx, id, accounts.UserPatch{DisplayName: ptr("X")})
			wantKind(t, err, beamledger.ErrNotFound)
			err = db.SetPasswordHash(ctx, id, "h", true)
			wantKind(t, err, beamledger.ErrNotFound)
		})
	}
	t.Run("email", func(t *testing.T) {
		t.Parallel()
		_, err := db.CredentialsByEmail(ctx, "nobody@example.org")
		wantKind(t, err, beamledger.ErrNotFound)
	})
}

func TestUsersFilter(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()
	// Created out of email order, so the listing's order is the query's doing.
	dora := mustCreateUser(t, db, "dora@example.org", accounts.RoleResearcher)
	bea := mustCreateUser(t, db, "bea@example.org", accounts.RoleStaff)
	cem := mustCreateUser(t, db, "cem@example.org", accounts.RoleResearcher)
	abe := mustCreateUser(t, db, "abe@example.org", accounts.RoleManager)
	if _, err := db.UpdateUser(ctx, cem.ID, accounts.UserPatch{Disabled: ptr(true)}); err != nil {
		t.Fatal(err)
	}
	tests := []struct {
		name   string
		filter accounts.UserFilter
		want   []string
	}{
		{"default hides disabled", accounts.UserFilter{}, []string{abe.ID, bea.ID, dora.ID}},
		{"with disabled", accounts.UserFilter{IncludeDisabled: true}, []string{abe.ID, bea.ID, cem.ID, dora.ID}},
		{"role", accounts.UserFilter{Role: accounts.RoleResearcher}, []string{dora.ID}},
		{"role with disabled", accounts.UserFilter{Role: accounts.RoleResearcher, IncludeDisabled: true}, []string{cem.ID, dora.ID}},
		{"role nobody has", accounts.UserFilter{Role: accounts.RoleAuditor, IncludeDisabled: true}, nil},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			t.Parallel()
			us, err := db.Users(ctx, tt.filter)
			if err != nil {
				t.Fatal(err)
			}
			var ids []string
			for _, u := range us {
				ids = append(ids, u.ID)
			}
			if !slices.Equal(ids, tt.want) {
				t.Errorf("Users(%+v) = %v, want %v", tt.filter, ids, tt.want)
			}
		})
	}
}

func TestUpdateUserPatchSemantics(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()
	orig, err := db.CreateUser(ctx, accounts.NewUser{
		Email: "ann@example.org", DisplayName: "Ann", ORCID: "0000-0002-1825-0097", Role: accounts.RoleResearcher,
	}, "")
	if err != nil {
		t.Fatal(err)
	}

	// An empty patch changes nothing but the update time.
	same, err := db.UpdateUser(ctx, orig.ID, accounts.UserPatch{})
	if err != nil {
		t.Fatal(err)
	}
	if same.DisplayName != orig.DisplayName || same.ORCID != orig.ORCID || same.Role != orig.Role || same.Disabled {
		t.Fatalf("empty patch changed %+v into %+v", orig, same)
	}

	renamed, err := db.UpdateUser(ctx, orig.ID, accounts.UserPatch{DisplayName: ptr("Ann Lee")})
	if err != nil {
		t.Fatal(err)
	}
	if renamed.DisplayName != "Ann Lee" || renamed.ORCID != orig.ORCID || renamed.Role != orig.Role {
		t.Fatalf("after renaming: %+v", renamed)
	}
	if renamed.UpdatedAt.Before(orig.UpdatedAt) || !renamed.CreatedAt.Equal(orig.CreatedAt) {
		t.Errorf("timestamps: created %v→%v, updated %v→%v", orig.CreatedAt, renamed.CreatedAt, orig.UpdatedAt, renamed.UpdatedAt)
	}

	promoted, err := db.UpdateUser(ctx, orig.ID, accounts.UserPatch{Role: ptr(accounts.RoleStaff), ORCID: ptr("0000-0001-5109-3700")})
	if err != nil {
		t.Fatal(err)
	}
	if promoted.Role != accounts.RoleStaff || promoted.ORCID != "0000-0001-5109-3700" || promoted.DisplayName != "Ann Lee" {
		t.Fatalf("after promoting: %+v", promoted)
	}
	if st, err := db.AuthState(ctx, orig.ID); err != nil || st.Role != accounts.RoleStaff || st.TokenVersion != 1 {
		t.Errorf("AuthState = %+v, %v; want staff at token version 1 (only disabling moves it)", st, err)
	}

	cleared, err := db.UpdateUser(ctx, orig.ID, accounts.UserPatch{ORCID: ptr("")})
	if err != nil {
		t.Fatal(err)
	}
	if cleared.ORCID != "" || cleared.DisplayName != "Ann Lee" || cleared.Role != accounts.RoleStaff {
		t.Fatalf("after clearing the ORCID: %+v", cleared)
	}
	if got, err := db.User(ctx, orig.ID); err != nil || got != cleared {
		t.Errorf("User = %+v, %v; want %+v", got, err, cleared)
	}
}

// The schema checks what the patch's Normalize would have caught.
func TestUpdateUserRefusedBySchema(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()
	u := mustCreateUser(t, db, "ann@example.org", accounts.RoleStaff)
	for name, p := range map[string]accounts.UserPatch{
		"orcid": {ORCID: ptr("0000-0002-1825-009")},
		"role":  {Role: ptr(accounts.Role("admin"))},
		"name":  {DisplayName: ptr("")},
	} {
		if _, err := db.UpdateUser(ctx, u.ID, p); !errors.Is(err, beamledger.ErrInvalid) {
			t.Errorf("bad %s: error = %v, want ErrInvalid", name, err)
		}
	}
	if got, err := db.User(ctx, u.ID); err != nil || got != u {
		t.Errorf("User = %+v, %v; want it unchanged: %+v", got, err, u)
	}
}

func TestDisablingUserEndsSessions(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()
	u := mustCreateUser(t, db, "ann@example.org", accounts.RoleResearcher)
	other := mustCreateUser(t, db, "bea@example.org", accounts.RoleResearcher)
	for _, s := range []string{"laptop", "phone"} {
		if err := db.CreateRefreshToken(ctx, u.ID, tokenHash(s), t0.Add(time.Hour)); err != nil {
			t.Fatal(err)
		}
	}
	if err := db.CreateRefreshToken(ctx, other.ID, tokenHash("other"), t0.Add(time.Hour)); err != nil {
		t.Fatal(err)
	}

	disabled, err := db.UpdateUser(ctx, u.ID, accounts.UserPatch{Disabled: ptr(true)})
	if err != nil {
		t.Fatal(err)
	}
	if !disabled.Disabled {
		t.Fatalf("UpdateUser returned %+v, want disabled", disabled)
	}
	st, err := db.AuthState(ctx, u.ID)
	if err != nil {
		t.Fatal(err)
	}
	if !st.Disabled || st.TokenVersion != 2 {
		t.Fatalf("AuthState = %+v, want disabled at token version 2", st)
	}

	// Re-enabling must not bring the old sessions back: they were revoked, not just
	// refused while the user was disabled.
	if _, err := db.UpdateUser(ctx, u.ID, accounts.UserPatch{Disabled: ptr(false)}); err != nil {
		t.Fatal(err)
	}
	if st, err := db.AuthState(ctx, u.ID); err != nil || st.Disabled || st.TokenVersion != 2 {
		t.Fatalf("after re-enabling AuthState = %+v, %v; want enabled, version still 2", st, err)
	}
	for _, s := range []string{"laptop", "phone"} {
		_, err := db.RotateRefreshToken(ctx, tokenHash(s), tokenHash(s+"-next"), t0, t0.Add(time.Hour))
		wantKind(t, err, beamledger.ErrUnauthorized)
	}
	// Someone else's session is untouched.
	if id, err := db.RotateRefreshToken(ctx, tokenHash("other"), tokenHash("other-next"), t0, t0.Add(time.Hour)); err != nil || id != other.ID {
		t.Errorf("other user's refresh = %q, %v; want %q", id, err, other.ID)
	}
}

func TestSetPasswordHash(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()
	u := mustCreateUser(t, db, "ann@example.org", accounts.RoleResearcher)
	if err := db.CreateRefreshToken(ctx, u.ID, tokenHash("s1"), t0.Add(time.Hour)); err != nil {
		t.Fatal(err)
	}

	// Without revoking: the hash changes, sessions and access tokens stay valid.
	if err := db.SetPasswordHash(ctx, u.ID, "hash-2", false); err != nil {
		t.Fatal(err)
	}
	if c, err := db.CredentialsByEmail(ctx, u.Email); err != nil || c.PasswordHash != "hash-2" {
		t.Fatalf("CredentialsByEmail = %+v, %v; want hash-2", c, err)
	}
	if st, err := db.AuthState(ctx, u.ID); err != nil || st.TokenVersion != 1 {
		t.Fatalf("AuthState = %+v, %v; want token version 1", st, err)
	}
	if id, err := db.RotateRefreshToken(ctx, tokenHash("s1"), tokenHash("s2"), t0, t0.Add(time.Hour)); err != nil || id != u.ID {
		t.Fatalf("refresh after a password change without revocation = %q, %v", id, err)
	}

	// With revoking: the version moves on and the live refresh token (s2) dies.
	if err := db.SetPasswordHash(ctx, u.ID, "hash-3", true); err != nil {
		t.Fatal(err)
	}
	if c, err := db.CredentialsByEmail(ctx, u.Email); err != nil || c.PasswordHash != "hash-3" {
		t.Fatalf("CredentialsByEmail = %+v, %v; want hash-3", c, err)
	}
	if st, err := db.AuthState(ctx, u.ID); err != nil || st.TokenVersion != 2 || st.Disabled {
		t.Fatalf("AuthState = %+v, %v; want enabled at token version 2", st, err)
	}
	_, err := db.RotateRefreshToken(ctx, tokenHash("s2"), tokenHash("s3"), t0, t0.Add(time.Hour))
	wantKind(t, err, beamledger.ErrUnauthorized)
}
