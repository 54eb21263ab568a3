package scheduling

import (
	"context"
	"regexp"
	"strings"
	"time"
	"unicode/utf8"

	"beamledger"
)

// Facility is the organisation that runs the instruments. Its IANA time zone is how
// local times are read and shown; instants are stored in UTC.
type Facility struct {
	Name     string `json:"name"`
	TimeZone string `json:"time_zone"`
	Currency string `json:"currency"` // ISO 4217 alphabetic code
}

var currencyCode = regexp.MustCompile(`^[A-Z]{3}$`)

// Normalize checks the facility settings.
func (f *Facility) Normalize() error {
	fe := beamledger.FieldErrors{}
	f.Name = strings.TrimSpace(f.Name)
	if f.Name == "" || utf8.RuneCountInString(f.Name) > 200 {
		fe.Add("name", "is required (at most 200 characters)")
	}
	if _, err := time.LoadLocation(f.TimeZone); err != nil || f.TimeZone == "" || f.TimeZone == "Local" {
		fe.Add("time_zone", "must be an IANA time zone name such as Europe/Berlin")
	}
	f.Currency = strings.ToUpper(strings.TrimSpace(f.Currency))
	if !currencyCode.MatchString(f.Currency) {
		fe.Add("currency", "must be an ISO 4217 code such as EUR")
	}
	return fe.Err()
}

// FacilityStore persists the one facility a database serves.
type FacilityStore interface {
	// Facility returns the facility. ErrNotFound before it is set up.
	Facility(ctx context.Context) (Facility, error)
	// SetFacility creates or replaces the facility settings.
	SetFacility(ctx context.Context, f Facility) (Facility, error)
}
