package main

import (
	"fmt"
	"io"
	"strings"
	"time"
)

// progress draws one file's progress on stderr: a bar with bytes, rate and time
// remaining, redrawn in place on a terminal and as a plain line every so often
// otherwise (a log file would fill with redraws).
type progress struct {
	w        io.Writer
	name     string
	total    int64
	doneN    int64
	phase    string
	started  time.Time
	startN   int64 // bytes counted when the phase began, so the rate is this phase's
	drawn    time.Time
	terminal bool
	every    time.Duration
}

func newProgress(w io.Writer, name string, total int64, o uploadOptions) *progress {
	return &progress{w: w, name: name, total: total, terminal: o.terminal, every: o.progressEvery}
}

// follow counts the named phase's bytes by asking pos for the count (the file
// offset reached) five times a second: bytes the kernel moves without passing them
// through this process, or that another goroutine hashes. A new phase starts its
// rate from where pos stands; following the same phase again (the next request of
// an upload) goes on with its rate. Nothing else may touch the bar until the
// returned stop has been called, which waits for the last count.
func (p *progress) follow(phase string, pos func() (int64, bool)) (stop func()) {
	if p.phase != phase {
		p.phase, p.doneN, p.startN, p.started = phase, 0, 0, time.Now()
		if n, ok := pos(); ok {
			p.doneN, p.startN = n, n
		}
	}
	quit, finished := make(chan struct{}), make(chan struct{})
	go func() {
		defer close(finished)
		t := time.NewTicker(200 * time.Millisecond)
		defer t.Stop()
		for {
			select {
			case <-quit:
				return
			case <-t.C:
				if n, ok := pos(); ok {
					p.doneN = n
					p.draw(false)
				}
			}
		}
	}()
	return func() {
		close(quit)
		<-finished
	}
}

// set moves the count to n (the offset a resumed upload goes on from).
func (p *progress) set(n int64) {
	p.doneN = n
	if p.startN > n || p.startN == 0 {
		p.startN, p.started = n, time.Now()
	}
}

// draw writes the line when it is time to.
func (p *progress) draw(final bool) {
	now := time.Now()
	wait := p.every
	if p.terminal {
		wait = 200 * time.Millisecond
	}
	if !final && now.Sub(p.drawn) < wait {
		return
	}
	p.drawn = now
	line := p.line(now)
	if p.terminal {
		fmt.Fprintf(p.w, "\r%-100s", line)
		if final {
			fmt.Fprintln(p.w)
		}
		return
	}
	fmt.Fprintln(p.w, line)
}

// line is "name  phase [#####.....]  12.0 MiB / 40.0 MiB  30%  8.1 MiB/s  0:04 left".
func (p *progress) line(now time.Time) string {
	frac := 1.0
	if p.total > 0 {
		frac = float64(p.doneN) / float64(p.total)
	}
	const width = 20
	filled := min(width, int(frac*width))
	bar := strings.Repeat("#", filled) + strings.Repeat(".", width-filled)
	elapsed := now.Sub(p.started).Seconds()
	rate := 0.0
	if elapsed > 0 {
		rate = float64(p.doneN-p.startN) / elapsed
	}
	left := "--:--"
	if rate > 0 {
		left = clock(time.Duration(float64(p.total-p.doneN) / rate * float64(time.Second)))
	}
	return fmt.Sprintf("%s  %s [%s]  %s / %s  %3.0f%%  %s/s  %s left", p.name, p.phase, bar, mib(p.doneN), mib(p.total), frac*100, mib(int64(rate)), left)
}

// note prints a message (a retry) on its own line.
func (p *progress) note(msg string) {
	if p.terminal {
		fmt.Fprintln(p.w)
	}
	fmt.Fprintf(p.w, "%s: %s\n", p.name, msg)
}

// done draws the last line.
func (p *progress) done(err error) {
	if err == nil {
		p.doneN = p.total
	}
	p.draw(true)
}

func mib(n int64) string { return fmt.Sprintf("%.1f MiB", float64(n)/(1<<20)) }

func clock(d time.Duration) string {
	s := int64(d.Round(time.Second).Seconds())
	if s >= 3600 {
		return fmt.Sprintf("%d:%02d:%02d", s/3600, s/60%60, s%60)
	}
	return fmt.Sprintf("%d:%02d", s/60, s%60)
}
