package postgres_test

import (
	"context"
	"fmt"
	"strings"
	"testing"

	"github.com/jackc/pgx/v5"

	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/storage/postgres"
	"beamledger/storage/postgres/pgtest"
)

// tamperLedger is a database with 30 events sealed and signed in five seals, and a
// connection that bypasses the append-only triggers as a superuser would
// (session_replication_role = replica).
func tamperLedger(t *testing.T, s *provenance.CheckpointSigner) (*postgres.DB, *pgx.Conn) {
	t.Helper()
	url := pgtest.NewDatabase(t)
	ctx := context.Background()
	db, err := postgres.Open(ctx, url, 4)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(db.Close)
	user := mustCreateUser(t, db, "tamper@example.org", accounts.RoleResearcher)
	project := mustCreateProject(t, db, "TAMPER-1", user.ID)
	for i := 0; i < 30; i++ {
		if _, err := db.CreateSpecimen(ctx, provenance.NewSpecimen{ProjectID: project.ID, Code: fmt.Sprintf("S-%02d", i), CreatedBy: user.ID}, t0); err != nil {
			t.Fatal(err)
		}
		if i%7 == 6 || i == 29 {
			if _, err := db.SealLedger(ctx, s, t0); err != nil {
				t.Fatal(err)
			}
		}
	}
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { conn.Close(context.Background()) })
	if _, err := conn.Exec(ctx, `SET session_replication_role = replica`); err != nil {
		t.Fatalf("bypass the triggers (the test needs a superuser): %v", err)
	}
	return db, conn
}

// TestLedgerAuditCatchesSQLTampering edits, deletes, reorders and inserts ledger rows
// directly in SQL, past the triggers, and expects the audit to name the first bad
// event each time, while the untouched ledger passes.
func TestLedgerAuditCatchesSQLTampering(t *testing.T) {
	t.Parallel()
	s := newLedgerSigner(t)
	editLeaf := func(index int, from, to string) string {
		return fmt.Sprintf(`UPDATE ledger_events SET leaf = convert_to(replace(convert_from(leaf, 'UTF8'), '%s', '%s'), 'UTF8') WHERE idx = %d`, from, to, index)
	}
	cases := []struct {
		name  string
		stmts []string
		// index is the first bad event the audit must name (-1: a checkpoint only).
		index   int64
		problem string
	}{
		{"untouched", nil, 0, ""},
		{"leaf edited", []string{editLeaf(12, "S-12", "S-99")}, 12, "leaf hash differs"},
		{"actor column edited", []string{`UPDATE ledger_events SET actor = 'mallory' WHERE idx = 4`}, 4, "differ from its canonical bytes"},
		{"event deleted", []string{`DELETE FROM ledger_events WHERE idx = 20`}, 20, "missing"},
		{"last event deleted", []string{`DELETE FROM ledger_events WHERE idx = 29`}, 29, "deleted from the end"},
		{"event unsealed", []string{`UPDATE ledger_events SET idx = NULL WHERE idx = 3`}, 3, "missing"},
		{"events reordered", []string{
			`UPDATE ledger_events SET idx = 1000 WHERE idx = 5`,
			`UPDATE ledger_events SET idx = 5 WHERE idx = 9`,
			`UPDATE ledger_events SET idx = 9 WHERE idx = 1000`,
		}, 5, "leaf hash differs"},
		{"event inserted in the middle", []string{
			`UPDATE ledger_events SET idx = idx + 100 WHERE idx >= 17`,
			`UPDATE ledger_events SET idx = idx - 99 WHERE idx >= 117`,
			`INSERT INTO ledger_events (idx, actor, at, action, entity_type, entity_id, leaf)
			 SELECT 17, actor, at, action, entity_type, entity_id, leaf FROM ledger_events WHERE idx = 2`,
		}, 17, "leaf hash differs"},
		{"event inserted at the end", []string{
			`INSERT INTO ledger_events (idx, actor, at, action, entity_type, entity_id, leaf)
			 SELECT 30, actor, at, action, entity_type, entity_id, leaf FROM ledger_events WHERE idx = 2`,
		}, 30, "no stored hash"},
		{"checkpoint edited", []string{`UPDATE ledger_checkpoints SET note = replace(note, E'\n14\n', E'\n15\n') WHERE size = 14`}, -1, "signature"},
		{"tree head deleted", []string{`DELETE FROM ledger_trees WHERE size = 30`, `DELETE FROM ledger_checkpoints WHERE size = 30`}, 28, "no sealed tree head"},
	}
	// The subtests run in parallel, after this function returns; a cleanup runs after
	// them, so the figure speaks of their outcome.
	t.Cleanup(func() {
		if !t.Failed() {
			t.Logf("figure: %d kinds of SQL tampering (edits, deletions, insertions, reorderings, rewritten hashes and heads) each caught at the first bad event", len(cases)-1)
		}
	})
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			t.Parallel()
			db, conn := tamperLedger(t, s)
			ctx := context.Background()
			for _, stmt := range tc.stmts {
				tag, err := conn.Exec(ctx, stmt)
				if err != nil || tag.RowsAffected() == 0 {
					t.Fatalf("%s: %v (%d rows)", stmt, err, tag.RowsAffected())
				}
			}
			rep, err := db.AuditLedger(ctx, s.Verifier())
			if err != nil {
				t.Fatal(err)
			}
			if tc.problem == "" {
				if rep.Fault != nil || rep.Events != 30 || rep.Heads != 5 || rep.Checkpoints != 5 {
					t.Fatalf("untouched ledger: %+v", rep)
				}
				return
			}
			if rep.Fault == nil {
				t.Fatalf("not caught: %+v", rep)
			}
			if rep.Fault.Index != tc.index || !strings.Contains(rep.Fault.Problem, tc.problem) {
				t.Fatalf("fault %q at index %d, want index %d and %q", rep.Fault.Problem, rep.Fault.Index, tc.index, tc.problem)
			}
		})
	}
}
