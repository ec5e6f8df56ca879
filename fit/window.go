package fit

import (
	"encoding/binary"
	"fmt"
	"math"
	"slices"
)

// sketchSize is k of the bottom-k sketch of row hashes kept per fit.
const sketchSize = 128

// rowHasher hashes the used columns of a row and keeps what a document
// needs to tell whether two fits saw overlapping rows: an order-free
// fingerprint (the sum of the row hashes) and a bottom-k sketch (the k
// smallest distinct row hashes), from which the resemblance of two row sets
// is estimated (Broder 1997, "On the resemblance and containment of
// documents"; Cohen & Kaplan 2007 for bottom-k sketches).
type rowHasher struct {
	sum    uint64
	sketch []uint64 // sorted, distinct, at most sketchSize
}

// newRowHasher returns an empty hasher. Row hashes use no random seed: the
// hash of a row must not depend on the run that computed it.
func newRowHasher() *rowHasher {
	return &rowHasher{}
}

// hash returns a 64-bit FNV-1a hash of the row's cells (numbers by their
// bits, text by its bytes), stable across runs.
func (h *rowHasher) hash(b *Block, r int, need Need) uint64 {
	const offset, prime = 14695981039346656037, 1099511628211
	x := uint64(offset)
	var bits [8]byte
	for _, c := range need.Numeric {
		binary.LittleEndian.PutUint64(bits[:], math.Float64bits(b.Numeric[c][r]))
		for _, v := range bits {
			x = (x ^ uint64(v)) * prime
		}
	}
	for _, c := range need.Text {
		for i := 0; i < len(b.Text[c][r]); i++ {
			x = (x ^ uint64(b.Text[c][r][i])) * prime
		}
		x = (x ^ 0xff) * prime // separator
	}
	// Finalise (splitmix64) so that the low and high bits mix well.
	x ^= x >> 30
	x *= 0xbf58476d1ce4e5b9
	x ^= x >> 27
	x *= 0x94d049bb133111eb
	x ^= x >> 31
	return x
}

func (h *rowHasher) add(x uint64) {
	h.sum += x
	if len(h.sketch) == sketchSize && x >= h.sketch[len(h.sketch)-1] {
		return
	}
	i, found := slices.BinarySearch(h.sketch, x)
	if found {
		return
	}
	h.sketch = slices.Insert(h.sketch, i, x)
	if len(h.sketch) > sketchSize {
		h.sketch = h.sketch[:sketchSize]
	}
}

// TimeWindow is the span of a time column over a fit's rows.
type TimeWindow struct {
	Column string  `json:"column"`
	First  float64 `json:"first"`
	Last   float64 `json:"last"`
}

// RowOverlap estimates how far the rows of two fits overlap from their
// sketches: the estimated Jaccard resemblance |A∩B|/|A∪B| of the two row
// sets (bottom-k estimator), and whether the two fits saw exactly the same
// rows (equal fingerprints and row counts).
func RowOverlap(a, b *DataRecord) (resemblance float64, identical bool, err error) {
	if len(a.Sketch) == 0 || len(b.Sketch) == 0 {
		return 0, false, fmt.Errorf("a fit document lacks its row sketch (written by an older curvewatch?)")
	}
	identical = a.Fingerprint == b.Fingerprint && a.RowsUsed == b.RowsUsed
	// The k smallest hashes of the union, and how many are in both.
	union := slices.Concat(a.Sketch, b.Sketch)
	slices.Sort(union)
	union = slices.Compact(union)
	k := min(sketchSize, len(union), max(len(a.Sketch), len(b.Sketch)))
	union = union[:k]
	both := 0
	for _, x := range union {
		_, inA := slices.BinarySearch(a.Sketch, x)
		_, inB := slices.BinarySearch(b.Sketch, x)
		if inA && inB {
			both++
		}
	}
	return float64(both) / float64(k), identical, nil
}
