package provenance

import (
	"errors"
	"fmt"
	"iter"
	"sync"

	"golang.org/x/mod/sumdb/note"
	"golang.org/x/mod/sumdb/tlog"
)

// StoredHash is one row of the ledger's stored hashes: tlog's numbering of the tree's
// nodes (tlog.StoredHashIndex) and the hash kept there.
type StoredHash struct {
	Index int64
	Hash  tlog.Hash
}

// LedgerSource is a ledger as read from storage, every sequence in one snapshot and
// in ascending order: sealed events by index, stored hashes by stored index, tree
// heads and checkpoints by size. Each sequence is read once, front to back.
type LedgerSource struct {
	Events      iter.Seq2[LedgerEvent, error]
	Hashes      iter.Seq2[StoredHash, error]
	Heads       iter.Seq2[TreeHead, error]
	Checkpoints iter.Seq2[Checkpoint, error]
}

// LedgerReport is what an audit found.
type LedgerReport struct {
	// Events, Heads and Checkpoints count what was checked before the first fault.
	Events      int64 `json:"events"`
	Heads       int64 `json:"tree_heads"`
	Checkpoints int64 `json:"checkpoints"`
	// Root is the recomputed root of the Events checked.
	Root tlog.Hash `json:"root"`
	// Fault is the first problem, nil when the ledger is intact.
	Fault *LedgerFault `json:"fault,omitempty"`
}

// LedgerFault is the first place where a ledger disagrees with itself.
type LedgerFault struct {
	// Index is the first event that is bad (edited, missing, inserted or out of
	// place), or, when only a signed root shows the damage because every stored
	// hash was rewritten to match, the first index that may be bad; -1 when no
	// event is at fault (a checkpoint's own text or signature is).
	Index int64 `json:"index"`
	// Size is the tree size of the head or checkpoint that showed the fault, 0 when
	// an event's own row showed it.
	Size    int64  `json:"size,omitempty"`
	Problem string `json:"problem"`
}

func (f *LedgerFault) Error() string {
	if f.Index < 0 {
		return fmt.Sprintf("ledger: checkpoint for size %d: %s", f.Size, f.Problem)
	}
	return fmt.Sprintf("ledger: first bad event %d: %s", f.Index, f.Problem)
}

// AuditLedger recomputes the whole tree from the events' canonical bytes and checks
// every stored hash, every tree head the sealer recorded and every checkpoint (its
// signature with the one of keys its signature names, its text against its row, its
// root against the recomputation). Several keys serve a ledger whose key was
// rotated; a checkpoint signed by none of them is a fault. It stops at the first
// fault. Memory stays in log₂ n: the tree is rebuilt by a TreeBuilder and every
// sequence is consumed as it is read. The error is for a source that could not be
// read; what is wrong with the ledger is in the report.
func AuditLedger(src LedgerSource, keys ...note.Verifier) (LedgerReport, error) {
	if len(keys) == 0 {
		return LedgerReport{}, errors.New("ledger audit: no verifier key given")
	}
	a := &audit{tree: NewTreeBuilder(), keys: keys}
	// The two long sequences come through pipes, each read on a goroutine of its
	// own in batches, so that reading them overlaps the tree's rebuilding and
	// costs a channel receive per batch rather than a switch per element.
	hashes, stopH := pipe(src.Hashes, func(h StoredHash) StoredHash { return h })
	defer stopH()
	heads, stopT := iter.Pull2(src.Heads)
	defer stopT()
	cps, stopC := iter.Pull2(src.Checkpoints)
	defer stopC()
	a.hashes = peekable[StoredHash]{next: hashes}
	a.heads = peekable[TreeHead]{next: heads}
	a.cps = peekable[Checkpoint]{next: cps}
	err := a.run(src.Events)
	a.rep.Events = a.tree.Size()
	if root, rerr := a.tree.Root(); rerr == nil {
		a.rep.Root = root
	}
	return a.rep, err
}

type audit struct {
	tree   *TreeBuilder
	keys   []note.Verifier
	hashes peekable[StoredHash]
	heads  peekable[TreeHead]
	cps    peekable[Checkpoint]
	rep    LedgerReport
	// signedSize is the largest size whose signed checkpoint matched: events below
	// it are vouched for even if every stored hash and tree head were rewritten,
	// which someone able to edit rows could do; only signatures resist that.
	signedSize int64
	// headSize is the largest size whose tree head matched.
	headSize int64
	// pending holds the stored hashes the newest Append computed, to compare.
	pending    []tlog.Hash
	pendingErr error
}

// checkedEvent is an event with what can be known of it alone, worked out on the
// events' own goroutine: its leaf hash, and whether its leaf is the canonical
// encoding of its row (MatchesLeaf).
type checkedEvent struct {
	ev        LedgerEvent
	hash      tlog.Hash
	canonical bool
}

func (a *audit) fault(index, size int64, format string, args ...any) {
	a.rep.Fault = &LedgerFault{Index: index, Size: size, Problem: fmt.Sprintf(format, args...)}
}

func (a *audit) run(events iter.Seq2[LedgerEvent, error]) error {
	var scratch []byte // the leaf envelope MatchesLeaf builds, reused
	next, stop := pipe(events, func(ev LedgerEvent) checkedEvent {
		var ok bool
		ok, scratch = ev.MatchesLeaf(scratch)
		return checkedEvent{ev: ev, hash: tlog.RecordHash(ev.Leaf), canonical: ok}
	})
	defer stop()
	for {
		ce, err, more := next()
		if !more {
			break
		}
		if err != nil {
			return err
		}
		if done, err := a.sizeReached(); done || err != nil {
			return err
		}
		if !a.event(ce) {
			return nil
		}
		if err := a.eventHashes(); err != nil || a.rep.Fault != nil {
			return err
		}
	}
	if done, err := a.sizeReached(); done || err != nil {
		return err
	}
	return a.tail()
}

// event checks one row's place and leaf and adds it to the tree; false after a fault.
func (a *audit) event(ce checkedEvent) bool {
	ev := ce.ev
	i := a.tree.Size()
	switch {
	case ev.Index == nil:
		a.fault(i, 0, "an unsealed row was read among sealed ones")
		return false
	case *ev.Index > i:
		a.fault(i, 0, "missing: the next row has index %d (deleted or moved)", *ev.Index)
		return false
	case *ev.Index < i:
		a.fault(*ev.Index, 0, "index %d appears again after %d (duplicated or moved)", *ev.Index, i-1)
		return false
	}
	if !ce.canonical {
		// The slow path tells why: bytes that are not a canonical event, or a row
		// that disagrees with them. Should it find neither, the leaf is an event in
		// canonical form after all, and passes.
		parsed, err := ParseLeaf(ev.Leaf)
		if err != nil {
			a.fault(i, 0, "canonical bytes: %v", err)
			return false
		}
		if !parsed.SameFields(ev) {
			a.fault(i, 0, "the row's actor, time, action or entity differ from its canonical bytes (edited)")
			return false
		}
	}
	a.pending, a.pendingErr = a.tree.AppendHash(ce.hash)
	return true
}

// eventHashes compares the hashes the last Append computed with the stored ones.
func (a *audit) eventHashes() error {
	i := a.tree.Size() - 1
	if a.pendingErr != nil {
		return a.pendingErr
	}
	first := tlog.StoredHashIndex(0, i)
	for k, want := range a.pending {
		got, ok, err := a.hashes.take()
		if err != nil {
			return err
		}
		switch {
		case !ok:
			a.fault(i, 0, "no stored hash %d: sealed rows were added without the sealer (inserted)", first+int64(k))
			return nil
		case got.Index != first+int64(k):
			a.fault(i, 0, "stored hash %d found where %d was expected (hashes deleted or inserted)", got.Index, first+int64(k))
			return nil
		case got.Hash != want:
			if k == 0 {
				a.fault(i, 0, "its leaf hash differs from the one stored when it was sealed (edited, inserted or reordered)")
			} else {
				a.fault(i, 0, "a subtree hash it completes differs from the stored one (a stored hash was rewritten)")
			}
			return nil
		}
	}
	return nil
}

// sizeReached checks every head and checkpoint for the tree's current size, and
// refuses ones for sizes already passed. done reports a fault.
func (a *audit) sizeReached() (done bool, err error) {
	n := a.tree.Size()
	h, hok, err := a.heads.peek()
	if err != nil {
		return true, err
	}
	cp, cok, err := a.cps.peek()
	if err != nil {
		return true, err
	}
	if (!hok || h.Size > n) && (!cok || cp.Size > n) {
		// The common case: nothing to check at this size, so no root to compute.
		return false, nil
	}
	root, err := a.tree.Root()
	if err != nil {
		return true, err
	}
	for {
		h, ok, err := a.heads.peek()
		if err != nil || !ok || h.Size > n {
			if err != nil {
				return true, err
			}
			break
		}
		a.heads.take()
		if h.Size < n {
			a.fault(h.Size, h.Size, "a second sealed tree head for size %d, or heads out of order", h.Size)
			return true, nil
		}
		if h.Root != root {
			a.fault(a.signedSize, n, "the sealed tree head's root differs from the recomputed one: the head was edited, or an event in [%d, %d) was changed and every stored hash rewritten to hide it", a.signedSize, n)
			return true, nil
		}
		a.rep.Heads++
		a.headSize = n
	}
	for {
		cp, ok, err := a.cps.peek()
		if err != nil || !ok || cp.Size > n {
			if err != nil {
				return true, err
			}
			break
		}
		a.cps.take()
		if cp.Size < n {
			a.fault(-1, cp.Size, "a second checkpoint for this size, or checkpoints out of order")
			return true, nil
		}
		if !a.checkpoint(cp, root) {
			return true, nil
		}
		a.rep.Checkpoints++
		a.signedSize = n
	}
	return false, nil
}

// checkpoint checks a stored checkpoint's signature and text against its row and
// the recomputed root; false after a fault.
func (a *audit) checkpoint(cp Checkpoint, root tlog.Hash) bool {
	opened, err := OpenCheckpointKeys([]byte(cp.Note), a.keys...)
	if err != nil {
		a.fault(-1, cp.Size, "%v", err)
		return false
	}
	if opened.Size != cp.Size || opened.Root != cp.Root || opened.Origin != cp.Origin {
		a.fault(-1, cp.Size, "the row's size, root or origin differ from its signed text (edited)")
		return false
	}
	if opened.Root != root {
		a.rootFault(cp.Size, "the signed root differs from the recomputed one")
		return false
	}
	return true
}

// rootFault reports a signed root that does not match at size n while every stored
// hash did: an event below n is bad and the hashes were rewritten to hide it, so
// which one is no longer known. The report gives the range from the last size a
// signed checkpoint vouches for to n.
func (a *audit) rootFault(n int64, problem string) {
	a.fault(a.signedSize, n, "%s: an event in [%d, %d) was changed, removed or reordered and the stored hashes rewritten to hide it", problem, a.signedSize, n)
}

// tail runs after the last event: no head, checkpoint or stored hash may lie beyond.
func (a *audit) tail() error {
	n := a.tree.Size()
	if h, ok, err := a.heads.peek(); err != nil {
		return err
	} else if ok {
		a.fault(n, h.Size, "a tree of %d was sealed but only %d events remain (deleted from the end)", h.Size, n)
		return nil
	}
	if cp, ok, err := a.cps.peek(); err != nil {
		return err
	} else if ok {
		a.fault(n, cp.Size, "a checkpoint for %d was signed but only %d events remain (deleted from the end)", cp.Size, n)
		return nil
	}
	if h, ok, err := a.hashes.peek(); err != nil {
		return err
	} else if ok {
		a.fault(n, 0, "stored hash %d belongs to an event that is gone (deleted from the end)", h.Index)
		return nil
	}
	if a.headSize != n {
		a.fault(a.headSize, n, "events %d to %d carry no sealed tree head (inserted without the sealer)", a.headSize, n-1)
	}
	return nil
}

// pipeBatch is how many elements a pipe passes at a time.
const pipeBatch = 4096

// pipeMsg is one batch through a pipe, or the error that ended the sequence.
type pipeMsg[U any] struct {
	items []U
	err   error
}

// pipe reads seq on a goroutine of its own, applies f to each element there, and
// passes the results on in batches through a channel at most two batches ahead. It
// returns a pull function like iter.Pull2's and a stop function that ends the
// reading (the sequence sees its yield return false) and waits for the goroutine.
func pipe[T, U any](seq iter.Seq2[T, error], f func(T) U) (next func() (U, error, bool), stop func()) {
	ch := make(chan pipeMsg[U], 2)
	done := make(chan struct{})
	go func() {
		defer close(ch)
		send := func(m pipeMsg[U]) bool {
			select {
			case ch <- m:
				return true
			case <-done:
				return false
			}
		}
		batch := make([]U, 0, pipeBatch)
		for v, err := range seq {
			if err != nil {
				send(pipeMsg[U]{items: batch, err: err})
				return
			}
			if batch = append(batch, f(v)); len(batch) == pipeBatch {
				if !send(pipeMsg[U]{items: batch}) {
					return
				}
				batch = make([]U, 0, pipeBatch)
			}
		}
		if len(batch) > 0 {
			send(pipeMsg[U]{items: batch})
		}
	}()
	var cur []U
	var failed error
	next = func() (U, error, bool) {
		var zero U
		for len(cur) == 0 {
			if failed != nil {
				err := failed
				failed = nil
				return zero, err, true
			}
			m, ok := <-ch
			if !ok {
				return zero, nil, false
			}
			cur, failed = m.items, m.err
		}
		v := cur[0]
		cur = cur[1:]
		return v, nil, true
	}
	var once sync.Once
	stop = func() {
		once.Do(func() {
			close(done)
			for range ch {
			}
		})
	}
	return next, stop
}

// peekable wraps a pulled sequence with one element of look-ahead.
type peekable[T any] struct {
	next func() (T, error, bool)
	buf  T
	err  error
	full bool
	done bool
}

func (p *peekable[T]) peek() (T, bool, error) {
	if !p.full && !p.done {
		v, err, ok := p.next()
		if !ok {
			p.done = true
		} else {
			p.buf, p.err, p.full = v, err, true
		}
	}
	if p.done && !p.full {
		var zero T
		return zero, false, nil
	}
	return p.buf, true, p.err
}

func (p *peekable[T]) take() (T, bool, error) {
	v, ok, err := p.peek()
	p.full = false
	return v, ok, err
}
