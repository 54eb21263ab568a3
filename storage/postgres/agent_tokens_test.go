package postgres_test

import (
	"context"
	"slices"
	"testing"
	"time"

	"beamledger"
	"beamledger/accounts"
	"beamledger/storage/postgres"
	"beamledger/storage/postgres/pgtest"
)

func mustCreateAgentToken(t *testing.T, db *postgres.DB, instrumentID, name, createdBy string, expiresAt *time.Time) accounts.AgentToken {
	t.Helper()
	tok, err := db.CreateAgentToken(context.Background(), accounts.NewAgentToken{
		InstrumentID: instrumentID, Name: name, Scopes: []accounts.Scope{accounts.ScopeInstrumentRead}, ExpiresAt: expiresAt,
	}, createdBy, tokenHash(name))
	if err != nil {
		t.Fatalf("CreateAgentToken(%s): %v", name, err)
	}
	return tok
}

func TestCreateAgentToken(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()
	staff := mustCreateUser(t, db, "staff@example.org", accounts.RoleStaff)
	in := mustCreateInstrument(t, db, "ARM-300")

	scopes := []accounts.Scope{accounts.ScopeAcquisitionWrite, accounts.ScopeInstrumentRead, accounts.ScopeUsageWrite}
	expires := t0.Add(90 * 24 * time.Hour)
	first, err := db.CreateAgentToken(ctx, accounts.NewAgentToken{
		InstrumentID: in.ID, Name: "acquisition PC", Scopes: scopes, ExpiresAt: &expires,
	}, staff.ID, tokenHash("first"))
	if err != nil {
		t.Fatal(err)
	}
	if !accounts.ValidID(first.ID) || first.InstrumentID != in.ID || first.Name != "acquisition PC" ||
		!slices.Equal(first.Scopes, scopes) || first.CreatedBy != staff.ID || first.CreatedAt.IsZero() ||
		first.ExpiresAt == nil || !first.ExpiresAt.Equal(expires) || first.RevokedAt != nil || first.LastUsedAt != nil {
		t.Fatalf("created = %+v", first)
	}
	second := mustCreateAgentToken(t, db, in.ID, "support PC", staff.ID, nil)
	if second.ExpiresAt != nil {
		t.Errorf("token without expiry came back expiring at %v", second.ExpiresAt)
	}
	ts, err := db.AgentTokens(ctx, in.ID)
	if err != nil {
		t.Fatal(err)
	}
	if len(ts) != 2 || ts[0].ID != second.ID || ts[1].ID != first.ID {
		t.Errorf("AgentTokens = %+v, want newest first: %s, %s", ts, second.ID, first.ID)
	}
	if ts, err := db.AgentTokens(ctx, mustCreateInstrument(t, db, "OTHER").ID); err != nil || len(ts) != 0 {
		t.Errorf("another instrument's tokens = %+v, %v; want none", ts, err)
	}
	for _, id := range []string{unknownID, "ARM-300", ""} {
		_, err := db.AgentTokens(ctx, id)
		wantKind(t, err, beamledger.ErrNotFound)
	}

	for _, id := range []string{unknownID, "arm-300", ""} {
		_, err := db.CreateAgentToken(ctx, accounts.NewAgentToken{
			InstrumentID: id, Name: "x", Scopes: []accounts.Scope{accounts.ScopeInstrumentRead},
		}, staff.ID, tokenHash("x"+id))
		wantKind(t, err, beamledger.ErrNotFound)
	}
}

func TestAgentTokenByHashNotesUseAtMostOnceAMinute(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()
	staff := mustCreateUser(t, db, "staff@example.org", accounts.RoleStaff)
	in := mustCreateInstrument(t, db, "ARM-300")
	tok := mustCreateAgentToken(t, db, in.ID, "acquisition PC", staff.ID, nil)

	// stored reads last_used_at back from the database, not from the method's answer.
	stored := func() *time.Time {
		t.Helper()
		ts, err := db.AgentTokens(ctx, in.ID)
		if err != nil || len(ts) != 1 {
			t.Fatalf("AgentTokens = %+v, %v", ts, err)
		}
		return ts[0].LastUsedAt
	}
	use := func(now time.Time, wantLastUsed time.Time) {
		t.Helper()
		got, err := db.AgentTokenByHash(ctx, tokenHash("acquisition PC"), now)
		if err != nil {
			t.Fatalf("AgentTokenByHash at %v: %v", now, err)
		}
		if got.ID != tok.ID || got.InstrumentID != in.ID || !slices.Equal(got.Scopes, tok.Scopes) {
			t.Fatalf("AgentTokenByHash = %+v, want %+v", got, tok)
		}
		if got.LastUsedAt == nil || !got.LastUsedAt.Equal(wantLastUsed) {
			t.Errorf("at %v returned last_used_at = %v, want %v", now, got.LastUsedAt, wantLastUsed)
		}
		if s := stored(); s == nil || !s.Equal(wantLastUsed) {
			t.Errorf("at %v stored last_used_at = %v, want %v", now, s, wantLastUsed)
		}
	}
	if s := stored(); s != nil {
		t.Fatalf("unused token has last_used_at %v", s)
	}
	use(t0, t0)
	use(t0.Add(30*time.Second), t0)
	use(t0.Add(59*time.Second), t0)
	use(t0.Add(61*time.Second), t0.Add(61*time.Second))
	use(t0.Add(90*time.Second), t0.Add(61*time.Second))
}

func TestAgentTokenByHashRefusals(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()
	staff := mustCreateUser(t, db, "staff@example.org", accounts.RoleStaff)
	in := mustCreateInstrument(t, db, "ARM-300")
	expiry := t0.Add(time.Hour)
	mustCreateAgentToken(t, db, in.ID, "expiring", staff.ID, &expiry)
	revoked := mustCreateAgentToken(t, db, in.ID, "revoked", staff.ID, nil)

	if _, err := db.AgentTokenByHash(ctx, tokenHash("expiring"), expiry.Add(-time.Second)); err != nil {
		t.Fatalf("a second before expiry: %v", err)
	}
	_, err := db.AgentTokenByHash(ctx, tokenHash("expiring"), expiry)
	wantKind(t, err, beamledger.ErrUnauthorized)
	_, err = db.AgentTokenByHash(ctx, tokenHash("expiring"), expiry.Add(time.Hour))
	wantKind(t, err, beamledger.ErrUnauthorized)

	if _, err := db.AgentTokenByHash(ctx, tokenHash("revoked"), t0); err != nil {
		t.Fatalf("before revocation: %v", err)
	}
	if _, err := db.RevokeAgentToken(ctx, in.ID, revoked.ID, t0.Add(time.Minute)); err != nil {
		t.Fatal(err)
	}
	_, err = db.AgentTokenByHash(ctx, tokenHash("revoked"), t0.Add(2*time.Minute))
	wantKind(t, err, beamledger.ErrUnauthorized)

	_, err = db.AgentTokenByHash(ctx, tokenHash("never issued"), t0)
	wantKind(t, err, beamledger.ErrUnauthorized)
	_, err = db.AgentTokenByHash(ctx, nil, t0)
	wantKind(t, err, beamledger.ErrUnauthorized)
}

func TestRevokeAgentToken(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()
	staff := mustCreateUser(t, db, "staff@example.org", accounts.RoleStaff)
	mine := mustCreateInstrument(t, db, "ARM-300")
	theirs := mustCreateInstrument(t, db, "SEM-1")
	tok := mustCreateAgentToken(t, db, mine.ID, "acquisition PC", staff.ID, nil)
	other := mustCreateAgentToken(t, db, theirs.ID, "their PC", staff.ID, nil)

	// The instrument named with the token id scopes it: another instrument's token is
	// not found, even by its exact id.
	_, err := db.RevokeAgentToken(ctx, mine.ID, other.ID, t0)
	wantKind(t, err, beamledger.ErrNotFound)
	if _, err := db.AgentTokenByHash(ctx, tokenHash("their PC"), t0); err != nil {
		t.Fatalf("the other instrument's token after a refused revocation: %v", err)
	}
	for _, ids := range [][2]string{{mine.ID, unknownID}, {mine.ID, "tok"}, {"ARM-300", tok.ID}, {unknownID, tok.ID}} {
		_, err := db.RevokeAgentToken(ctx, ids[0], ids[1], t0)
		wantKind(t, err, beamledger.ErrNotFound)
	}

	got, err := db.RevokeAgentToken(ctx, mine.ID, tok.ID, t0)
	if err != nil {
		t.Fatal(err)
	}
	if got.ID != tok.ID || got.RevokedAt == nil || !got.RevokedAt.Equal(t0) {
		t.Fatalf("revoked = %+v, want revoked at %v", got, t0)
	}
	// Idempotent: revoking again succeeds and keeps the first revocation time.
	again, err := db.RevokeAgentToken(ctx, mine.ID, tok.ID, t0.Add(time.Hour))
	if err != nil {
		t.Fatal(err)
	}
	if again.RevokedAt == nil || !again.RevokedAt.Equal(t0) {
		t.Errorf("second revocation moved revoked_at to %v, want %v", again.RevokedAt, t0)
	}
}
