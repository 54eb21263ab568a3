package provenance

import (
	"context"
	"time"
)

// SpecimenStore persists specimens.
type SpecimenStore interface {
	// CreateSpecimen registers a specimen. ErrConflict when the project already has one
	// with that code; ErrInvalid when the project does not exist.
	CreateSpecimen(ctx context.Context, n NewSpecimen, now time.Time) (Specimen, error)
	// Specimen returns one specimen with its used fluence. ErrNotFound when none.
	Specimen(ctx context.Context, id string) (Specimen, error)
	// Specimens lists specimens by code within project.
	Specimens(ctx context.Context, f SpecimenFilter) ([]Specimen, error)
}

// TuningStore persists corrector tunings.
type TuningStore interface {
	// RecordTuning stores a tuning. ErrNotFound when the instrument does not exist;
	// ErrInvalid when a correction names a tuning of another instrument; ErrConflict
	// when the tuning it corrects was already corrected.
	RecordTuning(ctx context.Context, n NewTuning, now time.Time) (Tuning, error)
	// Tuning returns one tuning. ErrNotFound when none.
	Tuning(ctx context.Context, id string) (Tuning, error)
	// Tunings lists an instrument's tunings, newest measurement first.
	Tunings(ctx context.Context, instrumentID string) ([]Tuning, error)
}

// CalibrationStore persists calibrations.
type CalibrationStore interface {
	// RecordCalibration stores a calibration, with the same errors as RecordTuning.
	RecordCalibration(ctx context.Context, n NewCalibration, now time.Time) (Calibration, error)
	// Calibrations lists an instrument's calibrations, newest effective first; with
	// inForceAt set, only those in force at that instant.
	Calibrations(ctx context.Context, instrumentID string, inForceAt *time.Time) ([]Calibration, error)
}

// NewAcquisition asks to record an acquisition.
type NewAcquisition struct {
	Input AcquisitionInput
	// VoltageV selects the tuning in force (tunings hold for one voltage).
	VoltageV float64
	// Actor is who records it: a user id or "agent:<token id>".
	Actor string
	Now   time.Time
}

// AcquisitionStore persists acquisitions and their versions.
type AcquisitionStore interface {
	// CreateAcquisition reads the acquisition's context (booking, instrument, operator,
	// specimen with its used fluence, tuning and calibrations in force at the start),
	// calls decide with it, and stores the draft it returns as version 1, all in one
	// transaction, so that two acquisitions on one specimen weigh its budget in turn.
	// ErrNotFound when the booking does not exist; ErrInvalid when the operator or
	// specimen does not; decide's error unchanged.
	CreateAcquisition(ctx context.Context, n NewAcquisition, decide func(AcquisitionContext) (Draft, error)) (Acquisition, error)
	// CorrectAcquisition adds a version to acquisition id in the same way, with the
	// current version in the context. ErrConflict when BaseVersion is stale.
	CorrectAcquisition(ctx context.Context, id string, n NewAcquisition, decide func(AcquisitionContext) (Draft, error)) (Acquisition, error)
	// Acquisition returns an acquisition at its newest version. ErrNotFound when none.
	Acquisition(ctx context.Context, id string) (Acquisition, error)
	// AcquisitionHistory returns every version, oldest first. ErrNotFound when none.
	AcquisitionHistory(ctx context.Context, id string) ([]AcquisitionVersion, error)
	// Acquisitions lists acquisitions at their newest versions, newest first.
	Acquisitions(ctx context.Context, f AcquisitionFilter) ([]Acquisition, error)
}
