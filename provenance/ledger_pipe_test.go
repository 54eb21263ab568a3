package provenance

import (
	"errors"
	"iter"
	"testing"
)

// TestPipe checks the audit's pipe: every element in order across batch
// boundaries, an error delivered after the elements before it and nothing after,
// and a stop mid-way that ends the sequence (its yield returns false) and waits.
func TestPipe(t *testing.T) {
	const n = 2*pipeBatch + 17
	boom := errors.New("boom")
	seq := func(n, failAt int, stopped *bool) iter.Seq2[int, error] {
		return func(yield func(int, error) bool) {
			for i := 0; i < n; i++ {
				if i == failAt {
					yield(0, boom)
					return
				}
				if !yield(i, nil) {
					*stopped = true
					return
				}
			}
		}
	}
	var stopped bool
	next, stop := pipe(seq(n, -1, &stopped), func(i int) int { return i * 2 })
	for want := 0; ; want++ {
		v, err, ok := next()
		if !ok {
			if want != n {
				t.Fatalf("ended after %d elements, want %d", want, n)
			}
			break
		}
		if err != nil || v != 2*want {
			t.Fatalf("element %d: %d, %v", want, v, err)
		}
	}
	stop()

	next, stop = pipe(seq(n, pipeBatch+5, &stopped), func(i int) int { return i })
	got := 0
	for {
		_, err, ok := next()
		if !ok {
			t.Fatal("the sequence ended without its error")
		}
		if err != nil {
			if !errors.Is(err, boom) || got != pipeBatch+5 {
				t.Fatalf("error %v after %d elements, want boom after %d", err, got, pipeBatch+5)
			}
			break
		}
		got++
	}
	if _, _, ok := next(); ok {
		t.Error("an element after the error")
	}
	stop()

	// The pipe reads at most four batches ahead (one being filled, two in the
	// channel, one being taken from): a longer sequence is still running at the
	// stop, however slowly the taker went.
	stopped = false
	next, stop = pipe(seq(10*pipeBatch, -1, &stopped), func(i int) int { return i })
	if _, _, ok := next(); !ok {
		t.Fatal("no first element")
	}
	stop() // returns once the goroutine is done, so stopped is settled
	if !stopped {
		t.Error("stop did not end the sequence")
	}
	stop() // a second stop is harmless
}
