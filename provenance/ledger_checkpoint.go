package provenance

import (
	"crypto/ed25519"
	"encoding/base64"
	"errors"
	"fmt"
	"strconv"
	"strings"
	"time"
	"unicode"
	"unicode/utf8"

	"golang.org/x/mod/sumdb/note"
	"golang.org/x/mod/sumdb/tlog"
)

// Checkpoint is a signed statement of the ledger's size and root hash, in the C2SP
// tlog-checkpoint text format (origin line, decimal size, base64 root) signed as a
// note (golang.org/x/mod/sumdb/note, Ed25519). Anyone with the facility's verifier
// key can check a proof against it without trusting the server.
type Checkpoint struct {
	Origin string    `json:"origin"`
	Size   int64     `json:"size"`
	Root   tlog.Hash `json:"root"`
	// Note is the whole signed note: the checkpoint text, a blank line and the
	// signature lines.
	Note     string    `json:"note"`
	SignedAt time.Time `json:"signed_at"`
}

// CheckpointBody writes the unsigned checkpoint text.
func CheckpointBody(origin string, size int64, root tlog.Hash) string {
	return origin + "\n" + strconv.FormatInt(size, 10) + "\n" + root.String() + "\n"
}

// ParseCheckpointBody reads the unsigned checkpoint text. Extension lines after the
// root are allowed by the format and ignored here; a size with leading zeros or a
// sign is refused, so one tree has one text.
func ParseCheckpointBody(text string) (origin string, size int64, root tlog.Hash, err error) {
	lines := strings.SplitAfter(text, "\n")
	if len(lines) < 4 || !strings.HasSuffix(text, "\n") {
		return "", 0, root, errors.New("checkpoint: want origin, size and root lines")
	}
	origin = strings.TrimSuffix(lines[0], "\n")
	sizeText := strings.TrimSuffix(lines[1], "\n")
	size, err = strconv.ParseInt(sizeText, 10, 64)
	if err != nil || size < 0 || strconv.FormatInt(size, 10) != sizeText {
		return "", 0, root, fmt.Errorf("checkpoint: size %q is not a decimal count", sizeText)
	}
	if root, err = tlog.ParseHash(strings.TrimSuffix(lines[2], "\n")); err != nil {
		return "", 0, root, errors.New("checkpoint: root is not a base64 SHA-256 hash")
	}
	if err := CheckOrigin(origin); err != nil {
		return "", 0, root, fmt.Errorf("checkpoint: %w", err)
	}
	return origin, size, root, nil
}

// CheckOrigin applies the note format's rule for key names, which a checkpoint's
// origin doubles as: non-empty valid UTF-8, no Unicode space, no '+'.
func CheckOrigin(origin string) error {
	if origin == "" || !utf8.ValidString(origin) || strings.IndexFunc(origin, unicode.IsSpace) >= 0 || strings.Contains(origin, "+") {
		return fmt.Errorf("ledger origin %q must be non-empty, without spaces or '+'", origin)
	}
	return nil
}

// CheckpointSigner signs checkpoints with the facility's Ed25519 key, under a key
// name equal to the ledger's origin, so a signature cannot be taken for one of
// another log's.
type CheckpointSigner struct {
	origin   string
	signer   note.Signer
	verifier note.Verifier
	vkey     string
}

// NewCheckpointSigner makes a signer for the ledger named origin (a schema-less URL
// such as "ledger.facility.example.org", without spaces or '+').
func NewCheckpointSigner(origin string, key ed25519.PrivateKey) (*CheckpointSigner, error) {
	if err := CheckOrigin(origin); err != nil {
		return nil, err
	}
	if len(key) != ed25519.PrivateKeySize {
		return nil, errors.New("ledger key is not an Ed25519 private key")
	}
	vkey, err := note.NewEd25519VerifierKey(origin, key.Public().(ed25519.PublicKey))
	if err != nil {
		return nil, err
	}
	verifier, err := note.NewVerifier(vkey)
	if err != nil {
		return nil, err
	}
	// The note package takes private keys only in its own text form: algorithm byte
	// 1 (Ed25519) then the seed, under the same name and key hash as the verifier.
	skey := fmt.Sprintf("PRIVATE+KEY+%s+%08x+%s", origin, verifier.KeyHash(),
		base64.StdEncoding.EncodeToString(append([]byte{1}, key.Seed()...)))
	signer, err := note.NewSigner(skey)
	if err != nil {
		return nil, err
	}
	return &CheckpointSigner{origin: origin, signer: signer, verifier: verifier, vkey: vkey}, nil
}

// Origin is the ledger's name, the first line of every checkpoint.
func (s *CheckpointSigner) Origin() string { return s.origin }

// VerifierKey is the public key in the note format ("name+hash+base64"), the form to
// publish beside the checkpoints and to give `verify-bundle`.
func (s *CheckpointSigner) VerifierKey() string { return s.vkey }

// Verifier checks this signer's signatures.
func (s *CheckpointSigner) Verifier() note.Verifier { return s.verifier }

// Sign signs the checkpoint for a tree of size leaves with the given root.
func (s *CheckpointSigner) Sign(size int64, root tlog.Hash, now time.Time) (Checkpoint, error) {
	body := CheckpointBody(s.origin, size, root)
	signed, err := note.Sign(&note.Note{Text: body}, s.signer)
	if err != nil {
		return Checkpoint{}, err
	}
	return Checkpoint{Origin: s.origin, Size: size, Root: root, Note: string(signed), SignedAt: now.UTC()}, nil
}

// ParseVerifierKey reads a verifier key in the note format ("name+hash+base64").
func ParseVerifierKey(vkey string) (note.Verifier, error) {
	v, err := note.NewVerifier(strings.TrimSpace(vkey))
	if err != nil {
		return nil, fmt.Errorf("ledger verifier key: %w", err)
	}
	return v, nil
}

// OpenCheckpointKeys is OpenCheckpoint for several keys of one ledger, as a key
// rotation leaves it: the checkpoint is checked with the key whose name and hash its
// signature line names, and its origin must be that key's name. A checkpoint signed
// by none of the keys is refused with an error naming the keys that did sign it.
func OpenCheckpointKeys(signed []byte, keys ...note.Verifier) (Checkpoint, error) {
	n, err := note.Open(signed, note.VerifierList(keys...))
	if err != nil {
		var unverified *note.UnverifiedNoteError
		if errors.As(err, &unverified) {
			signers := make([]string, 0, len(unverified.Note.UnverifiedSigs))
			for _, s := range unverified.Note.UnverifiedSigs {
				signers = append(signers, fmt.Sprintf("%s+%08x", s.Name, s.Hash))
			}
			return Checkpoint{}, fmt.Errorf("checkpoint signature: signed by none of the %d given keys (signed by %s)",
				len(keys), strings.Join(signers, ", "))
		}
		return Checkpoint{}, fmt.Errorf("checkpoint signature: %w", err)
	}
	origin, size, root, err := ParseCheckpointBody(n.Text)
	if err != nil {
		return Checkpoint{}, err
	}
	named := false
	for _, s := range n.Sigs {
		named = named || s.Name == origin
	}
	if !named {
		return Checkpoint{}, fmt.Errorf("checkpoint origin %q is not the name of the key that signed it (%q)", origin, n.Sigs[0].Name)
	}
	return Checkpoint{Origin: origin, Size: size, Root: root, Note: string(signed)}, nil
}

// OpenCheckpoint checks a signed checkpoint against the verifier and returns what it
// states. The origin must equal the verifier's key name. SignedAt is left zero: the
// note does not carry it.
func OpenCheckpoint(signed []byte, v note.Verifier) (Checkpoint, error) {
	n, err := note.Open(signed, note.VerifierList(v))
	if err != nil {
		return Checkpoint{}, fmt.Errorf("checkpoint signature: %w", err)
	}
	origin, size, root, err := ParseCheckpointBody(n.Text)
	if err != nil {
		return Checkpoint{}, err
	}
	if origin != v.Name() {
		return Checkpoint{}, fmt.Errorf("checkpoint origin %q is not the key's name %q", origin, v.Name())
	}
	return Checkpoint{Origin: origin, Size: size, Root: root, Note: string(signed)}, nil
}
