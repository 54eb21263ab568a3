package accounts

import (
	"slices"
	"strings"
	"time"

	"beamledger"
)

// Scope is one action an instrument agent token may perform on its instrument.
type Scope string

// The agent scopes. An agent acts only on the one instrument its token names.
const (
	// ScopeInstrumentRead reads the instrument, its bookings and calendar.
	ScopeInstrumentRead Scope = "instrument:read"
	// ScopeUsageWrite records check-in and check-out (usage) of bookings.
	ScopeUsageWrite Scope = "usage:write"
	// ScopeAcquisitionWrite records acquisitions and their operating conditions.
	ScopeAcquisitionWrite Scope = "acquisition:write"
	// ScopeFileWrite uploads data files for acquisitions.
	ScopeFileWrite Scope = "file:write"
)

// Scopes lists every agent scope.
var Scopes = []Scope{ScopeInstrumentRead, ScopeUsageWrite, ScopeAcquisitionWrite, ScopeFileWrite}

// AgentToken is an instrument computer's credential. Its secret is shown once, at
// creation, and stored only hashed.
type AgentToken struct {
	ID           string     `json:"id"`
	InstrumentID string     `json:"instrument_id"`
	Name         string     `json:"name"`
	Scopes       []Scope    `json:"scopes"`
	CreatedBy    string     `json:"created_by"`
	CreatedAt    time.Time  `json:"created_at"`
	ExpiresAt    *time.Time `json:"expires_at,omitempty"`
	RevokedAt    *time.Time `json:"revoked_at,omitempty"`
	LastUsedAt   *time.Time `json:"last_used_at,omitempty"`
}

// NewAgentToken is the input for creating an agent token.
type NewAgentToken struct {
	InstrumentID string     `json:"-"`
	Name         string     `json:"name"`
	Scopes       []Scope    `json:"scopes"`
	ExpiresAt    *time.Time `json:"expires_at"`
}

// Normalize checks the input; now is the current time, to refuse past expiry.
func (n *NewAgentToken) Normalize(now time.Time) error {
	fe := beamledger.FieldErrors{}
	n.Name = strings.TrimSpace(n.Name)
	if reason := checkName(n.Name, 100); reason != "" {
		fe.Add("name", reason)
	}
	if len(n.Scopes) == 0 {
		fe.Add("scopes", "name at least one of instrument:read, usage:write, acquisition:write, file:write")
	}
	for _, s := range n.Scopes {
		if !slices.Contains(Scopes, s) {
			fe.Add("scopes", "unknown scope "+string(s)+"; use instrument:read, usage:write, acquisition:write, file:write")
		}
	}
	slices.Sort(n.Scopes)
	n.Scopes = slices.Compact(n.Scopes)
	if n.ExpiresAt != nil && !n.ExpiresAt.After(now) {
		fe.Add("expires_at", "must be in the future")
	}
	return fe.Err()
}

// Active reports whether the token may still be used at now.
func (t AgentToken) Active(now time.Time) bool {
	return t.RevokedAt == nil && (t.ExpiresAt == nil || now.Before(*t.ExpiresAt))
}
