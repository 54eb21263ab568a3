package server

import (
	"fmt"
	"net/http"
	"strings"
	"testing"
	"time"

	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/scheduling"
)

// TestLedgerOverHTTP: records made through the API appear as ledger events; after a
// checkpoint, each event's inclusion proof checks against the checkpoint's root, the
// checkpoint's signature checks with the published key, and two checkpoints are
// consistent.
func TestLedgerOverHTTP(t *testing.T) {
	w := newWorld(t)
	researcher, auditor, manager := w.tokens[accounts.RoleResearcher], w.tokens[accounts.RoleAuditor], w.tokens[accounts.RoleManager]
	var setup ledgerHeadAnswer // the world's instruments' creation
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/ledger", "", nil, &setup)
	var sp provenance.Specimen
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/specimens", researcher, map[string]any{"project_id": w.own.ID, "code": "L-1"}, &sp)
	var head ledgerHeadAnswer
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/ledger", "", nil, &head)
	if head.Size != 0 || head.Unsealed != setup.Unsealed+1 || head.OldestUnsealed == nil {
		t.Errorf("before sealing: %+v; want the specimen's event waiting after %d", head, setup.Unsealed)
	}
	var first provenance.Checkpoint
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/ledger/checkpoints", manager, nil, &first)
	acq := testAcquisition(w)
	var second provenance.Checkpoint
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/ledger/checkpoints", manager, nil, &second)
	if first.Size != int64(setup.Unsealed)+1 || second.Size <= first.Size {
		t.Fatalf("checkpoints of sizes %d then %d", first.Size, second.Size)
	}

	var key ledgerKeyAnswer
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/ledger/key", "", nil, &key)
	v, err := provenance.ParseVerifierKey(key.VerifierKey)
	if err != nil {
		t.Fatal(err)
	}
	note := w.get("/api/v1/ledger/checkpoint?format=note", "", nil)
	cp, err := provenance.OpenCheckpoint(note.Body, v)
	if err != nil || cp.Size != second.Size || cp.Root != second.Root {
		t.Fatalf("the published checkpoint does not open with the published key: %+v %v", cp, err)
	}
	tampered := append([]byte{}, note.Body...)
	tampered[len(cp.Origin)+1]++ // the size line
	if _, err := provenance.OpenCheckpoint(tampered, v); err == nil {
		t.Error("an edited checkpoint still opened")
	}

	var events struct{ Items []provenance.LedgerEvent }
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/ledger/entities/acquisition/"+acq+"/events", auditor, nil, &events)
	if len(events.Items) != 1 || events.Items[0].Index == nil || events.Items[0].Action != provenance.ActionCreate {
		t.Fatalf("the acquisition's events: %+v", events.Items)
	}
	for i := int64(0); i < second.Size; i++ {
		var p provenance.InclusionProof
		w.expect(http.StatusOK, http.MethodGet, fmt.Sprintf("/api/v1/ledger/proofs/inclusion?index=%d&size=%d", i, second.Size), "", nil, &p)
		var e provenance.LedgerEvent
		w.expect(http.StatusOK, http.MethodGet, fmt.Sprintf("/api/v1/ledger/events/%d", i), auditor, nil, &e)
		if err := p.Check(); err != nil || p.Root != cp.Root || p.LeafHash != e.LeafHash() {
			t.Errorf("event %d: proof %v, root matches %v, leaf matches %v", i, err, p.Root == cp.Root, p.LeafHash == e.LeafHash())
		}
	}
	var c provenance.ConsistencyProof
	w.expect(http.StatusOK, http.MethodGet, fmt.Sprintf("/api/v1/ledger/proofs/consistency?from=%d&to=%d", first.Size, second.Size), "", nil, &c)
	if err := c.Check(); err != nil || c.FromRoot != first.Root || c.ToRoot != second.Root {
		t.Errorf("consistency %d→%d: %v", first.Size, second.Size, err)
	}
}

// TestBookingsInLedger: a booking's creation and each later change (here a move and
// a cancellation) enter the ledger with the booking's history.
func TestBookingsInLedger(t *testing.T) {
	w := newWorld(t)
	researcher, auditor := w.tokens[accounts.RoleResearcher], w.tokens[accounts.RoleAuditor]
	w.qualify(w.users[accounts.RoleResearcher].ID, scheduling.LevelIndependent)
	start := w.nextTuesday(9, 0)
	var b bookingAnswer
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(start, start.Add(2*time.Hour), scheduling.KindIndependent), &b)
	moved := start.Add(3 * time.Hour)
	w.expect(http.StatusOK, http.MethodPatch, "/api/v1/bookings/"+b.ID, researcher, map[string]string{"start": moved.Format(time.RFC3339),
		"end": moved.Add(2 * time.Hour).Format(time.RFC3339), "reason": "specimen late"}, nil)
	w.expect(http.StatusOK, http.MethodPost, "/api/v1/bookings/"+b.ID+"/cancel", researcher, map[string]string{"reason": "plans changed"}, nil)
	var events struct{ Items []provenance.LedgerEvent }
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/ledger/entities/booking/"+b.ID+"/events", auditor, nil, &events)
	var actions []string
	for _, e := range events.Items {
		actions = append(actions, e.Action)
	}
	if strings.Join(actions, ",") != "create,moved,cancelled" || !strings.Contains(string(events.Items[0].State), b.ID) {
		t.Errorf("the booking's ledger events: %v %s", actions, events.Items[0].State)
	}
}

// TestQualificationsInLedger: a grant, the revocation a second grant implies, and an
// explicit revocation each enter the ledger.
func TestQualificationsInLedger(t *testing.T) {
	w := newWorld(t)
	staff, auditor := w.tokens[accounts.RoleStaff], w.tokens[accounts.RoleAuditor]
	grant := func(level string) scheduling.Qualification {
		var q scheduling.Qualification
		w.expect(http.StatusCreated, http.MethodPost, "/api/v1/instruments/"+w.instr.ID+"/qualifications", staff,
			map[string]any{"user_id": w.other.ID, "level": level, "reason": "trained"}, &q)
		return q
	}
	first := grant("supervised")
	second := grant("independent")
	w.expect(http.StatusOK, http.MethodPost, "/api/v1/qualifications/"+second.ID+"/revoke", staff, map[string]string{"reason": "left the group"}, nil)
	actions := func(id string) string {
		var events struct{ Items []provenance.LedgerEvent }
		w.expect(http.StatusOK, http.MethodGet, "/api/v1/ledger/entities/qualification/"+id+"/events", auditor, nil, &events)
		var as []string
		for _, e := range events.Items {
			as = append(as, e.Action)
		}
		return strings.Join(as, ",")
	}
	if got := actions(first.ID); got != "create,revoke" {
		t.Errorf("the superseded grant's events: %s", got)
	}
	if got := actions(second.ID); got != "create,revoke" {
		t.Errorf("the revoked grant's events: %s", got)
	}
}

// exerciseLedger calls every ledger route with success and with an error, for
// TestOpenAPIExamplesExercise.
func exerciseLedger(t *testing.T, w *world) {
	manager, staff, auditor := w.tokens[accounts.RoleManager], w.tokens[accounts.RoleStaff], w.tokens[accounts.RoleAuditor]
	w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/ledger/checkpoint", "", nil, nil) // none signed yet
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/ledger", "", nil, nil)
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/ledger/key", "", nil, nil)
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/ledger/checkpoints", manager, nil, nil)
	w.expect(http.StatusForbidden, http.MethodPost, "/api/v1/ledger/checkpoints", staff, nil, nil)
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/ledger/checkpoint", "", nil, nil)
	if r := w.get("/api/v1/ledger/checkpoint?format=note", "", nil); r.StatusCode != http.StatusOK {
		t.Errorf("checkpoint note: %d", r.StatusCode)
	}
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/ledger/checkpoints?after=0", "", nil, nil)
	w.expect(http.StatusBadRequest, http.MethodGet, "/api/v1/ledger/checkpoints?limit=0", "", nil, nil)
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/ledger/proofs/inclusion?index=0&size=1", "", nil, nil)
	w.expect(http.StatusBadRequest, http.MethodGet, "/api/v1/ledger/proofs/inclusion?index=0", "", nil, nil)
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/ledger/proofs/consistency?from=1&to=1", "", nil, nil)
	w.expect(http.StatusBadRequest, http.MethodGet, "/api/v1/ledger/proofs/consistency?from=0&to=1", "", nil, nil)
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/ledger/events/0", auditor, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/ledger/events/999999999", auditor, nil, nil)
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/ledger/entities/specimen/"+w.own.ID+"/events", auditor, nil, nil)
	w.expect(http.StatusForbidden, http.MethodGet, "/api/v1/ledger/entities/specimen/"+w.own.ID+"/events", w.tokens[accounts.RoleResearcher], nil, nil)
}
