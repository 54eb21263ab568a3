package provenance

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/json"
	"errors"
	"fmt"
	"strconv"
	"time"
	"unicode/utf8"

	"github.com/gowebpki/jcs"
	"github.com/valyala/fastjson"
	"golang.org/x/mod/sumdb/tlog"
)

// The ledger is the append-only record of every change, kept as a Merkle tree with
// RFC 6962 hashing so that anyone holding a signed checkpoint can check that an
// event is in it and that a later tree extends an earlier one. An event is written
// in the transaction of the change it records; it has no place in the tree until a
// sealer gives it the next index, so writers never wait on each other for an order.

// Entity types named by ledger events: the product's own words for what changed.
const (
	EntitySpecimen    = "specimen"
	EntityTuning      = "tuning"
	EntityCalibration = "calibration"
	EntityAcquisition = "acquisition"
	EntityDataFile    = "data_file"
	EntityDerivation  = "derivation"
	// EntityBooking's events are a booking's creation and each change recorded in its
	// history (moved, cancelled, displaced, checked in or out, no-show).
	EntityBooking = "booking"
	// EntityQualification's events are grants (a grant that supersedes another also
	// records the revocation it implies) and revocations.
	EntityQualification = "qualification"
	// EntityInstrument's events are an instrument's creation and its changes: its
	// capabilities, whether it is bookable, its condition limits. Each holds the
	// instrument as it then stands.
	EntityInstrument = "instrument"
	// Cost recovery. A rate schedule, adjustment or cost entry is created once and
	// never edited; a billing policy (the facility's, or an instrument's override under
	// the instrument's id) and a funding account are created, then corrected; a
	// funding split (a project's default or a booking's own, under its id) is replaced
	// whole; a statement is created as a draft, corrected each time the draft is
	// recomputed, and issued once. A statement's state holds its lines, the charges.
	EntityRateSchedule   = "rate_schedule"
	EntityBillingPolicy  = "billing_policy"
	EntityFundingAccount = "funding_account"
	EntityFundingSplit   = "funding_split"
	EntityStatement      = "statement"
	EntityAdjustment     = "adjustment"
	EntityCostEntry      = "cost_entry"
)

// Actions named by ledger events. Records here are never edited: a change is either
// a new record or a correction that adds a version or names what it corrects.
const (
	ActionCreate  = "create"
	ActionCorrect = "correct"
	ActionRevoke  = "revoke"
	// ActionIssue: a statement became final.
	ActionIssue = "issue"
)

// LedgerFormat numbers the layout of an event's canonical bytes (the "v" member),
// so that a later layout can be told apart from this one by anyone re-hashing old
// events.
const LedgerFormat = 1

// LedgerEvent is one change as the ledger keeps it. Leaf is what the Merkle tree
// hashes; the other fields are read back from it and from the row that holds it.
type LedgerEvent struct {
	// Seq identifies the event from the moment it is written, before it has an
	// index. It orders events of one process's writes but is not the ledger order:
	// a transaction that began first may commit last.
	Seq int64 `json:"seq"`
	// Index is the event's position in the tree; nil until the event is sealed.
	Index      *int64    `json:"index"`
	Actor      string    `json:"actor"`
	At         time.Time `json:"at"`
	Action     string    `json:"action"`
	EntityType string    `json:"entity_type"`
	EntityID   string    `json:"entity_id"`
	// State is the new state of the entity (or the change), as canonical JSON.
	State json.RawMessage `json:"state"`
	// Leaf is the event's canonical bytes: RFC 8785 JSON of the fields above except
	// Seq and Index. Its RFC 6962 leaf hash is what proofs are about.
	Leaf []byte `json:"leaf"`
}

// Sealed reports whether the event has its place in the tree.
func (e LedgerEvent) Sealed() bool { return e.Index != nil }

// LeafHash is the RFC 6962 leaf hash of the event, SHA-256(0x00 ‖ Leaf).
func (e LedgerEvent) LeafHash() tlog.Hash { return tlog.RecordHash(e.Leaf) }

// leafBody is the layout of an event's canonical bytes. JSON names sort the same
// way RFC 8785 sorts them, though the order here does not matter: the encoding
// re-sorts.
type leafBody struct {
	V          int             `json:"v"`
	Action     string          `json:"action"`
	Actor      string          `json:"actor"`
	At         string          `json:"at"`
	EntityID   string          `json:"entity_id"`
	EntityType string          `json:"entity_type"`
	State      json.RawMessage `json:"state"`
}

// leafTime is how an event's instant is written: UTC, always six fractional digits.
// A fixed width keeps the text one-to-one with the instant; microseconds are what
// PostgreSQL keeps, so the row's timestamp and the leaf agree exactly.
const leafTime = "2006-01-02T15:04:05.000000Z07:00"

// NewLedgerEvent builds an event from a change: state is marshalled to JSON and the
// whole event is encoded canonically with the RFC 8785 JSON Canonicalization
// Scheme. Numbers are therefore written as ECMAScript writes IEEE 754 doubles: an
// integer above 2⁵³ would lose digits, so such values belong in strings (ids and
// byte counts here stay far below).
func NewLedgerEvent(actor, action, entityType, entityID string, at time.Time, state any) (LedgerEvent, error) {
	at = at.UTC().Truncate(time.Microsecond)
	body := leafBody{V: LedgerFormat, Action: action, Actor: actor, At: at.Format(leafTime),
		EntityID: entityID, EntityType: entityType}
	if err := body.check(); err != nil {
		return LedgerEvent{}, err
	}
	for _, f := range []string{actor, action, entityType, entityID} {
		if !utf8.ValidString(f) {
			return LedgerEvent{}, errors.New("ledger event: a field is not UTF-8")
		}
	}
	// Only the state needs the general canonicalization; the members around it are
	// strings this package writes as RFC 8785 does, in RFC 8785's member order.
	e := LedgerEvent{Actor: actor, At: at, Action: action, EntityType: entityType, EntityID: entityID}
	leaf := e.appendLeafPrefix(make([]byte, 0, 256))
	start := len(leaf)
	leaf, err := appendCanonicalState(leaf, state)
	if err != nil {
		return LedgerEvent{}, err
	}
	end := len(leaf)
	leaf = append(leaf, leafSuffix...)
	e.Leaf = leaf
	e.State = leaf[start:end]
	return e, nil
}

// CanonicalState is a state that writes its own RFC 8785 canonical JSON, for states
// large enough that the general way (encoding/json, then canonicalization) would cost
// more than producing them. The bytes must be exactly the general way's; a type that
// implements it keeps a test saying so. An error means "not covered": the general way
// is used instead, after dst[:len(dst)] (what was there before the call).
type CanonicalState interface {
	AppendCanonicalJSON(dst []byte) ([]byte, error)
}

// StateDigest is the SHA-256 of state's RFC 8785 canonical JSON: the digest of the
// state an event for it holds, so that a copy of a record (a printed statement) can be
// matched to its ledger event without the ledger at hand.
func StateDigest(state any) ([sha256.Size]byte, error) {
	canon, err := appendCanonicalState(nil, state)
	if err != nil {
		return [sha256.Size]byte{}, err
	}
	return sha256.Sum256(canon), nil
}

// appendCanonicalState appends the RFC 8785 form of state's JSON to dst: written by
// the state itself when it can, straight into dst, else the general way.
func appendCanonicalState(dst []byte, state any) ([]byte, error) {
	if c, ok := state.(CanonicalState); ok {
		if out, err := c.AppendCanonicalJSON(dst); err == nil {
			return out, nil
		}
	}
	raw, err := json.Marshal(state)
	if err != nil {
		return nil, fmt.Errorf("ledger event state: %w", err)
	}
	canon, err := jcs.Transform(raw)
	if err != nil {
		return nil, fmt.Errorf("ledger event canonical form: %w", err)
	}
	return append(dst, canon...), nil
}

func (b leafBody) check() error {
	switch {
	case b.Actor == "":
		return errors.New("ledger event: no actor")
	case b.Action == "":
		return errors.New("ledger event: no action")
	case b.EntityType == "" || b.EntityID == "":
		return errors.New("ledger event: no entity")
	}
	return nil
}

// ParseLeaf reads an event back from its canonical bytes. It refuses bytes that are
// not in canonical form (re-encoding them must give them back unchanged), so two
// different leaves can never describe the same event.
func ParseLeaf(leaf []byte) (LedgerEvent, error) {
	canon, err := jcs.Transform(leaf)
	if err != nil {
		return LedgerEvent{}, fmt.Errorf("ledger leaf is not JSON: %w", err)
	}
	if !bytes.Equal(canon, leaf) {
		return LedgerEvent{}, errors.New("ledger leaf is not in RFC 8785 canonical form")
	}
	dec := json.NewDecoder(bytes.NewReader(leaf))
	dec.DisallowUnknownFields()
	var b leafBody
	if err := dec.Decode(&b); err != nil {
		return LedgerEvent{}, fmt.Errorf("ledger leaf layout: %w", err)
	}
	if b.V != LedgerFormat {
		return LedgerEvent{}, fmt.Errorf("ledger leaf format %d is not %d", b.V, LedgerFormat)
	}
	if err := b.check(); err != nil {
		return LedgerEvent{}, err
	}
	at, err := time.Parse(leafTime, b.At)
	if err != nil || at.Format(leafTime) != b.At {
		return LedgerEvent{}, fmt.Errorf("ledger leaf time %q is not in the ledger's form", b.At)
	}
	return LedgerEvent{Actor: b.Actor, At: at, Action: b.Action, EntityType: b.EntityType, EntityID: b.EntityID,
		State: b.State, Leaf: leaf}, nil
}

// SameFields reports whether two events agree on everything the leaf holds. The
// ledger's rows keep those fields in columns too, for searching; a column edited
// without its leaf must not pass.
func (e LedgerEvent) SameFields(o LedgerEvent) bool {
	return e.Actor == o.Actor && e.At.Equal(o.At) && e.Action == o.Action && e.EntityType == o.EntityType &&
		e.EntityID == o.EntityID && bytes.Equal(e.Leaf, o.Leaf)
}

// MatchesLeaf reports whether e's Leaf is exactly the canonical encoding of e's
// actor, time, action and entity around a state that is valid JSON with no control
// character (RFC 8785 writes none: no whitespace between tokens, and strings escape
// them). It builds the
// envelope the leaf must have (RFC 8785 orders the members by name) from the fields
// and compares bytes, which is what a row whose columns were edited without its
// leaf fails; it costs a small fraction of ParseLeaf, which re-canonicalizes the
// whole leaf. The state's own canonical form was fixed when the event was written
// (NewLedgerEvent) and its bytes are fixed by the leaf hash. scratch is reused
// between calls; the returned one is for the next call.
func (e LedgerEvent) MatchesLeaf(scratch []byte) (bool, []byte) {
	b := e.appendLeafPrefix(scratch[:0])
	leaf := e.Leaf
	if len(leaf) < len(b)+len(leafSuffix) || !bytes.HasPrefix(leaf, b) || !bytes.HasSuffix(leaf, []byte(leafSuffix)) {
		return false, b
	}
	return compactJSON(leaf[len(b) : len(leaf)-len(leafSuffix)]), b
}

// compactJSON reports whether b is one JSON value (RFC 8259) with no byte below
// 0x20 anywhere: not between tokens, where canonical JSON has no whitespace, and not
// in strings, where JSON allows none. It is the audit's check of every state, so it
// is the validator the audit pays for most: fastjson's runs about four times as
// fast as encoding/json's on ledger states, and, for bytes without control
// characters, agrees with encoding/json.Valid (FuzzCompactJSON checks both).
func compactJSON(b []byte) bool {
	if len(b) == 0 {
		return false
	}
	for _, c := range b {
		if c < 0x20 {
			return false
		}
	}
	return fastjson.ValidateBytes(b) == nil
}

// leafSuffix ends every leaf: the format member, last in RFC 8785's order.
var leafSuffix = `,"v":` + strconv.Itoa(LedgerFormat) + `}`

// appendLeafPrefix appends the leaf's members before the state's value, as RFC
// 8785 writes them: in order of name, strings escaped by appendJCSString.
func (e LedgerEvent) appendLeafPrefix(b []byte) []byte {
	b = append(b, `{"action":`...)
	b = appendJCSString(b, e.Action)
	b = append(b, `,"actor":`...)
	b = appendJCSString(b, e.Actor)
	b = append(b, `,"at":"`...)
	b = appendLeafTime(b, e.At)
	b = append(b, `","entity_id":`...)
	b = appendJCSString(b, e.EntityID)
	b = append(b, `,"entity_type":`...)
	b = appendJCSString(b, e.EntityType)
	return append(b, `,"state":`...)
}

// appendLeafTime appends t as leafTime writes it. The audit writes one per event,
// and this costs a fraction of time.AppendFormat's general layout interpreter;
// years outside 0000–9999 (which leafTime cannot write in four digits) take the
// general path.
func appendLeafTime(b []byte, t time.Time) []byte {
	t = t.UTC()
	year, month, day := t.Date()
	if year < 0 || year > 9999 {
		return t.AppendFormat(b, leafTime)
	}
	hour, minute, second := t.Clock()
	b = appendDigits(b, year, 4)
	b = append(b, '-')
	b = appendDigits(b, int(month), 2)
	b = append(b, '-')
	b = appendDigits(b, day, 2)
	b = append(b, 'T')
	b = appendDigits(b, hour, 2)
	b = append(b, ':')
	b = appendDigits(b, minute, 2)
	b = append(b, ':')
	b = appendDigits(b, second, 2)
	b = append(b, '.')
	b = appendDigits(b, t.Nanosecond()/1000, 6)
	return append(b, 'Z')
}

// appendDigits appends v (0 or more, below 10^width) in exactly width decimal
// digits.
func appendDigits(b []byte, v, width int) []byte {
	start := len(b)
	for range width {
		b = append(b, '0')
	}
	for i := len(b) - 1; i >= start && v > 0; i-- {
		b[i] = byte('0' + v%10)
		v /= 10
	}
	return b
}

// appendJCSString appends s as RFC 8785 §3.2.2.2 writes a string (ECMAScript's
// JSON.stringify): '"' and '\' escaped, the short escapes \b \t \n \f \r, other
// control characters as \u00xx in lower-case hex, everything else as it is.
func appendJCSString(b []byte, s string) []byte {
	const hex = "0123456789abcdef"
	b = append(b, '"')
	for i := 0; i < len(s); i++ {
		c := s[i]
		switch {
		case c == '"' || c == '\\':
			b = append(b, '\\', c)
		case c == '\b':
			b = append(b, '\\', 'b')
		case c == '\t':
			b = append(b, '\\', 't')
		case c == '\n':
			b = append(b, '\\', 'n')
		case c == '\f':
			b = append(b, '\\', 'f')
		case c == '\r':
			b = append(b, '\\', 'r')
		case c < 0x20:
			b = append(b, '\\', 'u', '0', '0', hex[c>>4], hex[c&0xf])
		default:
			b = append(b, c)
		}
	}
	return append(b, '"')
}

// TreeHead is the ledger's tree after a seal: its size and RFC 6962 root hash.
type TreeHead struct {
	Size     int64     `json:"size"`
	Root     tlog.Hash `json:"root"`
	SealedAt time.Time `json:"sealed_at"`
}

// InclusionProof shows that the event at Index is in the tree of Size leaves whose
// root is Root (RFC 6962 §2.1.1 audit path).
type InclusionProof struct {
	Index    int64            `json:"index"`
	Size     int64            `json:"size"`
	LeafHash tlog.Hash        `json:"leaf_hash"`
	Root     tlog.Hash        `json:"root"`
	Proof    tlog.RecordProof `json:"proof"`
}

// Check verifies the proof against its own root and leaf hash. A caller that trusts
// a checkpoint also compares Root with the checkpoint's root for Size.
func (p InclusionProof) Check() error {
	return tlog.CheckRecord(p.Proof, p.Size, p.Root, p.Index, p.LeafHash)
}

// ConsistencyProof shows that the tree of From leaves (root FromRoot) is a prefix of
// the tree of To leaves (root ToRoot): nothing sealed before From was changed,
// removed or reordered (RFC 6962 §2.1.2).
type ConsistencyProof struct {
	From     int64          `json:"from"`
	To       int64          `json:"to"`
	FromRoot tlog.Hash      `json:"from_root"`
	ToRoot   tlog.Hash      `json:"to_root"`
	Proof    tlog.TreeProof `json:"proof"`
}

// Check verifies the proof against its two roots.
func (p ConsistencyProof) Check() error {
	return tlog.CheckTree(p.Proof, p.To, p.ToRoot, p.From, p.FromRoot)
}

// LedgerStore reads the ledger. Events are written by the stores of the things that
// change, in the same transaction; sealing and checkpoints are the sealer's.
type LedgerStore interface {
	// LedgerEvent returns the sealed event at index. ErrNotFound when the tree has
	// no such index yet.
	LedgerEvent(ctx context.Context, index int64) (LedgerEvent, error)
	// EventsFor lists one entity's events, sealed and unsealed, oldest first.
	// ErrNotFound is never returned: an entity with no events has an empty list.
	EventsFor(ctx context.Context, entityType, entityID string) ([]LedgerEvent, error)
	// LedgerHead returns the newest sealed tree; size 0 before the first seal.
	LedgerHead(ctx context.Context) (TreeHead, error)
	// InclusionProof proves the event at index is in the tree of size leaves.
	// ErrInvalid unless 0 ≤ index < size ≤ the sealed size.
	InclusionProof(ctx context.Context, index, size int64) (InclusionProof, error)
	// ConsistencyProof proves the tree of from leaves is a prefix of the tree of
	// to leaves. ErrInvalid unless 0 < from ≤ to ≤ the sealed size.
	ConsistencyProof(ctx context.Context, from, to int64) (ConsistencyProof, error)
	// LatestCheckpoint returns the newest signed checkpoint. ErrNotFound before the
	// first.
	LatestCheckpoint(ctx context.Context) (Checkpoint, error)
	// Checkpoint returns the checkpoint signed for a tree of size leaves.
	// ErrNotFound when none was.
	Checkpoint(ctx context.Context, size int64) (Checkpoint, error)
	// Checkpoints lists checkpoints with size > after, smallest first, at most limit
	// (1 to 1000; other values mean 1000).
	Checkpoints(ctx context.Context, after int64, limit int) ([]Checkpoint, error)
}
