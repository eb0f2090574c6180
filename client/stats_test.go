package client

import "testing"

// Nearest-rank percentiles of 1..100 (the textbook definition: the value
// of rank ⌈p/100·N⌉): p50 is 50, p99 is 99.
func TestSpreadOfNearestRank(t *testing.T) {
	xs := make([]float64, 100)
	for i := range xs {
		xs[len(xs)-1-i] = float64(i + 1) // reversed: SpreadOf sorts
	}
	s := SpreadOf(xs, 2)
	if s.P50 != 100 || s.P99 != 198 || s.Max != 200 || s.Mean != 101 || s.N != 100 {
		t.Errorf("SpreadOf(1..100, ×2) = %+v, want p50 100, p99 198, max 200, mean 101", s)
	}
	if xs[0] != 100 {
		t.Error("SpreadOf reordered its input")
	}
	if one := SpreadOf([]float64{3}, 1); one.P50 != 3 || one.P99 != 3 {
		t.Errorf("one value: %+v", one)
	}
	if z := SpreadOf(nil, 1); z != (Spread{}) {
		t.Errorf("empty: %+v", z)
	}
}
