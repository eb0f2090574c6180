package server

import (
	"math"
	"testing"
)

// TestJointHistoryInterpolates: the joints at a capture time between two
// measurements are the straight line between them (the value is known
// exactly for joints moving linearly in time); before the oldest kept and
// after the newest the nearest is held; a clock going backwards starts
// afresh; and nothing is allocated.
func TestJointHistoryInterpolates(t *testing.T) {
	h := newJointHistory(2)
	dst := make([]float64, 2)
	fallback := []float64{7, 8}
	h.at(dst, 1, fallback)
	if dst[0] != 7 || dst[1] != 8 {
		t.Fatalf("empty history gave %v, want the fallback", dst)
	}
	// q(t) = (2t, 1 − t), measured every 10 ms for longer than the history.
	q := make([]float64, 2)
	for k := range 2 * jointHistoryLength {
		tS := 0.01 * float64(k)
		q[0], q[1] = 2*tS, 1-tS
		h.push(tS, q)
	}
	newest := 0.01 * float64(2*jointHistoryLength-1)
	oldest := newest - 0.01*float64(jointHistoryLength-1)
	for _, c := range []struct{ tS, want0 float64 }{
		{newest - 0.023, 2 * (newest - 0.023)}, // between two measurements
		{newest - 0.02, 2 * (newest - 0.02)},   // on one
		{newest + 0.5, 2 * newest},             // after the newest: held
		{oldest - 0.5, 2 * oldest},             // before the oldest kept: held
	} {
		h.at(dst, c.tS, fallback)
		// Rounding of a two-point interpolation: a few ulps of values ≈ 1.
		if math.Abs(dst[0]-c.want0) > 1e-12 || math.Abs(dst[1]-(1-c.want0/2)) > 1e-12 {
			t.Errorf("at %.3f s: %v, want (%g, %g)", c.tS, dst, c.want0, 1-c.want0/2)
		}
	}
	h.push(0.005, []float64{3, 4}) // the clock restarted
	h.at(dst, 0.5, fallback)
	if dst[0] != 3 || dst[1] != 4 {
		t.Errorf("after a clock restart: %v, want (3, 4)", dst)
	}
	tS := 1.0
	if a := testing.AllocsPerRun(20, func() {
		tS += 0.01
		h.push(tS, q)
		h.at(dst, tS-0.02, fallback)
	}); a != 0 {
		t.Errorf("push + at allocate %v times, want 0", a)
	}
}
