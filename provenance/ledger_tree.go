package provenance

import (
	"errors"
	"fmt"

	"golang.org/x/mod/sumdb/tlog"
)

// TreeBuilder appends leaves to an RFC 6962 tree and returns, for each, the stored
// hashes that tlog.StoredHashes defines (the leaf hash and every subtree it
// completes). It keeps only the tree's right edge, the newest stored hash of each
// level: that is all tlog needs to hash the next leaf and the root, so both the
// sealer and a verifier reading a ledger of any length use memory in log₂ n.
type TreeBuilder struct {
	size int64
	// edge maps a level to the stored-hash index and hash of that level's newest
	// complete subtree.
	edge map[int]edgeHash
}

type edgeHash struct {
	index int64
	hash  tlog.Hash
}

// NewTreeBuilder starts an empty tree.
func NewTreeBuilder() *TreeBuilder { return &TreeBuilder{edge: map[int]edgeHash{}} }

// EdgeIndexes lists the stored-hash indexes a TreeBuilder resumed at size needs: per
// level, the newest complete subtree of a tree of that size.
func EdgeIndexes(size int64) []int64 {
	var out []int64
	for level := 0; size>>level > 0; level++ {
		out = append(out, tlog.StoredHashIndex(level, size>>level-1))
	}
	return out
}

// ResumeTreeBuilder continues a tree of size leaves, reading its right edge (the
// hashes EdgeIndexes names) from r.
func ResumeTreeBuilder(size int64, r tlog.HashReader) (*TreeBuilder, error) {
	b := NewTreeBuilder()
	b.size = size
	idx := EdgeIndexes(size)
	if len(idx) == 0 {
		return b, nil
	}
	hs, err := r.ReadHashes(idx)
	if err != nil {
		return nil, err
	}
	if len(hs) != len(idx) {
		return nil, fmt.Errorf("ledger tree: read %d of %d edge hashes", len(hs), len(idx))
	}
	for level, i := range idx {
		b.edge[level] = edgeHash{i, hs[level]}
	}
	return b, nil
}

// Size is the number of leaves appended so far (or resumed from).
func (b *TreeBuilder) Size() int64 { return b.size }

// Append adds a leaf and returns the hashes to store from
// tlog.StoredHashIndex(0, index) on, where index is the leaf's position (the size
// before the call).
func (b *TreeBuilder) Append(leaf []byte) ([]tlog.Hash, error) {
	return b.AppendHash(tlog.RecordHash(leaf))
}

// AppendHash is Append given the leaf's hash (tlog.RecordHash) instead of the leaf.
func (b *TreeBuilder) AppendHash(leafHash tlog.Hash) ([]tlog.Hash, error) {
	n := b.size
	hs, err := tlog.StoredHashesForRecordHash(n, leafHash, b)
	if err != nil {
		return nil, err
	}
	// The first hash is level 0 at position n; each further one is the subtree it
	// completes, one level up.
	for level, h := range hs {
		b.edge[level] = edgeHash{tlog.StoredHashIndex(level, n>>level), h}
	}
	b.size++
	return hs, nil
}

// Root is the RFC 6962 root hash of the tree so far.
func (b *TreeBuilder) Root() (tlog.Hash, error) { return tlog.TreeHash(b.size, b) }

// ReadHashes implements tlog.HashReader over the right edge only; asking for
// anything else is a bug in the index arithmetic, reported as an error.
func (b *TreeBuilder) ReadHashes(indexes []int64) ([]tlog.Hash, error) {
	out := make([]tlog.Hash, len(indexes))
	for k, i := range indexes {
		level, _ := tlog.SplitStoredHashIndex(i)
		e, ok := b.edge[level]
		if !ok || e.index != i {
			return nil, errors.New("ledger tree: hash outside the right edge")
		}
		out[k] = e.hash
	}
	return out, nil
}
