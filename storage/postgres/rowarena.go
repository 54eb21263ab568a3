package postgres

import (
	"time"

	"github.com/google/uuid"
	"github.com/jackc/pgx/v5/pgtype"

	"beamledger/scheduling"
)

// The billing reads (a month's bookings for statements, a year's for utilization)
// turn up to a million rows into Go values. Allocating each row's identifiers and
// usages on their own made the garbage collector the largest cost, so these helpers
// share what they can: identifiers repeat (a few instruments, users and projects) and
// are read as 16-byte keys, and usages sit on shared backing arrays.

// names gives each 16-byte identifier its text once.
type names map[[16]byte]string

// of is id's text, "" for NULL.
func (n names) of(id pgtype.UUID) string {
	if !id.Valid {
		return ""
	}
	s, ok := n[id.Bytes]
	if !ok {
		s = uuid.UUID(id.Bytes).String()
		n[id.Bytes] = s
	}
	return s
}

// usageArena hands out usages and their end instants from shared blocks.
type usageArena struct {
	usages []scheduling.Usage
	ends   []time.Time
}

const arenaBlock = 4096

// add appends a usage starting at started and ending at ended (NULL: still in use) to
// *dst. A booking's first usage takes one slot of a shared block with capacity one, so
// a second (rare) is copied out by append rather than overwriting a neighbour's.
func (a *usageArena) add(dst *[]scheduling.Usage, bookingID string, started time.Time, ended pgtype.Timestamptz) {
	u := scheduling.Usage{BookingID: bookingID, StartedAt: started}
	if ended.Valid {
		if len(a.ends) == cap(a.ends) {
			a.ends = make([]time.Time, 0, arenaBlock)
		}
		a.ends = append(a.ends, ended.Time)
		u.EndedAt = &a.ends[len(a.ends)-1]
	}
	if *dst != nil {
		*dst = append(*dst, u)
		return
	}
	if len(a.usages) == cap(a.usages) {
		a.usages = make([]scheduling.Usage, 0, arenaBlock)
	}
	a.usages = append(a.usages, u)
	n := len(a.usages)
	*dst = a.usages[n-1 : n : n]
}
