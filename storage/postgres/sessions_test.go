package postgres_test

import (
	"context"
	"errors"
	"fmt"
	"sync"
	"testing"
	"time"

	"beamledger"
	"beamledger/accounts"
	"beamledger/storage/postgres"
	"beamledger/storage/postgres/pgtest"
)

// rotate presents old and asks for next in its place, at t0 with an hour's life.
func rotate(db *postgres.DB, old, next string) (string, error) {
	return db.RotateRefreshToken(context.Background(), tokenHash(old), tokenHash(next), t0, t0.Add(time.Hour))
}

func mustStartSession(t *testing.T, db *postgres.DB, userID, secret string, expiresAt time.Time) {
	t.Helper()
	if err := db.CreateRefreshToken(context.Background(), userID, tokenHash(secret), expiresAt); err != nil {
		t.Fatalf("CreateRefreshToken: %v", err)
	}
}

func TestRotateRefreshTokenChain(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	u := mustCreateUser(t, db, "ann@example.org", accounts.RoleResearcher)
	mustStartSession(t, db, u.ID, "a", t0.Add(time.Hour))

	for _, step := range [][2]string{{"a", "b"}, {"b", "c"}, {"c", "d"}} {
		id, err := rotate(db, step[0], step[1])
		if err != nil {
			t.Fatalf("rotate %s→%s: %v", step[0], step[1], err)
		}
		if id != u.ID {
			t.Fatalf("rotate %s→%s returned user %q, want %q", step[0], step[1], id, u.ID)
		}
	}
	_, err := rotate(db, "zzz", "e")
	wantKind(t, err, beamledger.ErrUnauthorized)
}

func TestRefreshReplayRevokesFamily(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	u := mustCreateUser(t, db, "ann@example.org", accounts.RoleResearcher)
	mustStartSession(t, db, u.ID, "a", t0.Add(time.Hour))
	mustStartSession(t, db, u.ID, "other-device", t0.Add(time.Hour))

	if _, err := rotate(db, "a", "b"); err != nil {
		t.Fatal(err)
	}
	// "a" is presented again: someone holds a copy. The thief's new token must not be
	// issued, and the legitimate holder's "b" must die too, since we cannot tell which
	// of the two is the thief.
	_, err := rotate(db, "a", "b2")
	wantKind(t, err, beamledger.ErrUnauthorized)
	_, err = rotate(db, "b", "c")
	wantKind(t, err, beamledger.ErrUnauthorized)
	_, err = rotate(db, "b2", "c2")
	wantKind(t, err, beamledger.ErrUnauthorized)

	// Another family (another device) of the same user is not touched.
	if id, err := rotate(db, "other-device", "other-next"); err != nil || id != u.ID {
		t.Errorf("other family: %q, %v; want %q", id, err, u.ID)
	}
}

func TestRefreshTokenExpiry(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()
	u := mustCreateUser(t, db, "ann@example.org", accounts.RoleResearcher)
	mustStartSession(t, db, u.ID, "old", t0)
	mustStartSession(t, db, u.ID, "young", t0.Add(time.Microsecond))

	// A token is dead from its expiry instant on.
	_, err := db.RotateRefreshToken(ctx, tokenHash("old"), tokenHash("old-next"), t0, t0.Add(time.Hour))
	wantKind(t, err, beamledger.ErrUnauthorized)
	if _, err := db.RotateRefreshToken(ctx, tokenHash("young"), tokenHash("young-next"), t0, t0.Add(time.Hour)); err != nil {
		t.Fatalf("a token one microsecond from expiry: %v", err)
	}
	// The new token carries the expiry it was given, not its parent's.
	if _, err := db.RotateRefreshToken(ctx, tokenHash("young-next"), tokenHash("third"), t0.Add(59*time.Minute), t0.Add(2*time.Hour)); err != nil {
		t.Fatalf("rotating the new token within its own life: %v", err)
	}
	_, err = db.RotateRefreshToken(ctx, tokenHash("third"), tokenHash("fourth"), t0.Add(2*time.Hour), t0.Add(3*time.Hour))
	wantKind(t, err, beamledger.ErrUnauthorized)
}

// The disabled check must hold on its own, for a user disabled by some path that did
// not revoke their sessions (or before a revocation commits).
func TestRefreshRefusedForDisabledUser(t *testing.T) {
	t.Parallel()
	db, conn := openRaw(t)
	ctx := context.Background()
	u := mustCreateUser(t, db, "ann@example.org", accounts.RoleResearcher)
	mustStartSession(t, db, u.ID, "a", t0.Add(time.Hour))
	if _, err := conn.Exec(ctx, `UPDATE users SET disabled = true WHERE id = $1`, u.ID); err != nil {
		t.Fatal(err)
	}
	_, err := rotate(db, "a", "b")
	wantKind(t, err, beamledger.ErrUnauthorized)

	// Refused, not consumed: once enabled again the same token works.
	if _, err := conn.Exec(ctx, `UPDATE users SET disabled = false WHERE id = $1`, u.ID); err != nil {
		t.Fatal(err)
	}
	if id, err := rotate(db, "a", "b"); err != nil || id != u.ID {
		t.Errorf("after re-enabling: %q, %v", id, err)
	}
}

func TestRevokeRefreshFamily(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()
	u := mustCreateUser(t, db, "ann@example.org", accounts.RoleResearcher)
	mustStartSession(t, db, u.ID, "a", t0.Add(time.Hour))
	mustStartSession(t, db, u.ID, "x", t0.Add(time.Hour))
	if _, err := rotate(db, "a", "b"); err != nil {
		t.Fatal(err)
	}

	// Unknown tokens are ignored without an error and without side effects.
	if err := db.RevokeRefreshFamily(ctx, tokenHash("never issued"), t0); err != nil {
		t.Fatalf("RevokeRefreshFamily(unknown) = %v, want nil", err)
	}
	if err := db.RevokeRefreshFamily(ctx, nil, t0); err != nil {
		t.Fatalf("RevokeRefreshFamily(nil) = %v, want nil", err)
	}
	if id, err := rotate(db, "x", "y"); err != nil || id != u.ID {
		t.Fatalf("after revoking unknown tokens, rotate x = %q, %v", id, err)
	}

	// Logging out with an already used member of the family still ends the family.
	if err := db.RevokeRefreshFamily(ctx, tokenHash("a"), t0); err != nil {
		t.Fatal(err)
	}
	_, err := rotate(db, "b", "c")
	wantKind(t, err, beamledger.ErrUnauthorized)
	// Revoking twice is fine.
	if err := db.RevokeRefreshFamily(ctx, tokenHash("b"), t0); err != nil {
		t.Fatal(err)
	}
	// The other family lives on.
	if id, err := rotate(db, "y", "z"); err != nil || id != u.ID {
		t.Errorf("other family after logout: %q, %v", id, err)
	}
}

// Eight requests race to refresh with one token. Exactly one may win; the others are
// replays of a used token, so they revoke the family, and the winner's new token dies
// with it. Several rounds run, because the first one races mostly on opening
// connections; later rounds find the pool warm and overlap in the database.
func TestRotateRefreshTokenConcurrently(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	u := mustCreateUser(t, db, "ann@example.org", accounts.RoleResearcher)
	const n, rounds = 8, 12
	for round := range rounds {
		shared := fmt.Sprint("shared-", round)
		mustStartSession(t, db, u.ID, shared, t0.Add(time.Hour))
		var (
			wg    sync.WaitGroup
			start = make(chan struct{})
			ids   [n]string
			errs  [n]error
		)
		for i := range n {
			wg.Go(func() {
				<-start
				ids[i], errs[i] = rotate(db, shared, fmt.Sprint(shared, "-next-", i))
			})
		}
		close(start)
		wg.Wait()

		winner := -1
		for i := range n {
			switch {
			case errs[i] == nil:
				if winner >= 0 {
					t.Fatalf("round %d: requests %d and %d both rotated the same token", round, winner, i)
				}
				if ids[i] != u.ID {
					t.Errorf("round %d: winner returned user %q, want %q", round, ids[i], u.ID)
				}
				winner = i
			case !errors.Is(errs[i], beamledger.ErrUnauthorized):
				t.Errorf("round %d: request %d: %v, want ErrUnauthorized", round, i, errs[i])
			}
		}
		if winner < 0 {
			t.Fatalf("round %d: no request rotated the token: %v", round, errs)
		}
		_, err := rotate(db, fmt.Sprint(shared, "-next-", winner), shared+"-after")
		wantKind(t, err, beamledger.ErrUnauthorized)
	}
}
