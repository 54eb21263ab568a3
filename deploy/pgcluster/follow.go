package pgcluster

import (
	"io"
	"os"
	"time"
)

// logFollower copies lines the server appends to its log file to the
// caller's writer. The server writes to a file (pg_ctl -l) rather than to us
// so that its log outlives a crash of the caller; following it gives the
// caller the lines anyway.
type logFollower struct {
	stop chan struct{}
	done chan struct{}
}

// followLog starts copying path from offset to w; nil when w discards.
func followLog(path string, offset int64, w io.Writer) *logFollower {
	if lw, ok := w.(*lockedWriter); ok && lw.w == io.Discard {
		return nil
	}
	f := &logFollower{stop: make(chan struct{}), done: make(chan struct{})}
	go func() {
		defer close(f.done)
		tick := time.NewTicker(200 * time.Millisecond)
		defer tick.Stop()
		for {
			offset = copyFrom(path, offset, w)
			select {
			case <-f.stop:
				copyFrom(path, offset, w) // the shutdown messages
				return
			case <-tick.C:
			}
		}
	}()
	return f
}

// copyFrom copies what path holds beyond offset and returns the new offset.
func copyFrom(path string, offset int64, w io.Writer) int64 {
	file, err := os.Open(path)
	if err != nil {
		return offset
	}
	defer file.Close()
	if _, err := file.Seek(offset, io.SeekStart); err != nil {
		return offset
	}
	n, _ := io.Copy(w, file)
	return offset + n
}

// close stops following after a last copy; safe on nil and to call twice.
func (f *logFollower) close() {
	if f == nil {
		return
	}
	select {
	case <-f.stop:
	default:
		close(f.stop)
	}
	<-f.done
}
