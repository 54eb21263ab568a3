package quantity

import (
	"math"
	"testing"
)

// FuzzParse holds Parse to three promises on any input: it does not panic, a value it
// accepts is finite, and re-formatting an accepted value and parsing it again gives
// the same float and dimension (what the stored "si" field relies on).
func FuzzParse(f *testing.F) {
	for _, s := range []string{"300 kV", "25 mrad", "2 µs", "2 us", "0.1 Å", "0.1 Å", "10 pm",
		"80 mm", "1.5e-3 rad", "-20 °C", "90°", "1e-400 V", "1e308 kV", "\u22121 m", "5 k°C"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, text string) {
		q, err := Parse(text)
		if err != nil {
			return
		}
		if math.IsNaN(q.SI) || math.IsInf(q.SI, 0) {
			t.Fatalf("Parse(%q) accepted a non-finite %v", text, q.SI)
		}
		again, err := Parse(Format(q.SI, q.Dim))
		if err != nil || again != q {
			t.Fatalf("Parse(%q) = %v, but Parse(Format) = %v, %v", text, q, again, err)
		}
	})
}
