package scheduling

import (
	"slices"
	"time"
)

// QualificationLevel is a user's standing on one instrument.
type QualificationLevel string

// Qualification levels, in increasing order of independence.
const (
	// LevelSupervised may book only assisted or training time.
	LevelSupervised QualificationLevel = "supervised"
	// LevelIndependent may also book independent time inside opening hours.
	LevelIndependent QualificationLevel = "independent"
	// LevelUnattended may also book unattended out-of-hours and overnight time.
	LevelUnattended QualificationLevel = "unattended"
)

// QualificationLevels lists the levels in increasing order.
var QualificationLevels = []QualificationLevel{LevelSupervised, LevelIndependent, LevelUnattended}

// Valid reports whether l is a known level.
func (l QualificationLevel) Valid() bool { return slices.Contains(QualificationLevels, l) }

// AtLeast reports whether l is at or above min.
func (l QualificationLevel) AtLeast(min QualificationLevel) bool {
	return slices.Index(QualificationLevels, l) >= slices.Index(QualificationLevels, min) && l.Valid()
}

// Qualification is a user's standing on one instrument, granted by staff. It supports,
// and never replaces, the facility's own safety training and local rules.
type Qualification struct {
	ID           string             `json:"id"`
	UserID       string             `json:"user_id"`
	InstrumentID string             `json:"instrument_id"`
	Level        QualificationLevel `json:"level"`
	GrantedBy    string             `json:"granted_by"`
	GrantedAt    time.Time          `json:"granted_at"`
	Reason       string             `json:"reason"`
	// ExpiresAfterIdleDays, when set, ends the qualification after that many days
	// without usage of the instrument (counted from the last usage, or the grant).
	ExpiresAfterIdleDays *int       `json:"expires_after_idle_days,omitempty"`
	LastUsedAt           *time.Time `json:"last_used_at,omitempty"`
	RevokedAt            *time.Time `json:"revoked_at,omitempty"`
	RevokedBy            string     `json:"revoked_by,omitempty"`
	RevokeReason         string     `json:"revoke_reason,omitempty"`
}

// ExpiresAt is when inactivity ends the qualification, if it can.
func (q Qualification) ExpiresAt() (time.Time, bool) {
	if q.ExpiresAfterIdleDays == nil {
		return time.Time{}, false
	}
	from := q.GrantedAt
	if q.LastUsedAt != nil && q.LastUsedAt.After(from) {
		from = *q.LastUsedAt
	}
	return from.AddDate(0, 0, *q.ExpiresAfterIdleDays), true
}

// ActiveAt reports whether the qualification is in force at t.
func (q Qualification) ActiveAt(t time.Time) bool {
	if q.RevokedAt != nil && !t.Before(*q.RevokedAt) {
		return false
	}
	if exp, ok := q.ExpiresAt(); ok && !t.Before(exp) {
		return false
	}
	return !t.Before(q.GrantedAt)
}
