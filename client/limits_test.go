package client

import (
	"math"
	"testing"

	"tautline/sim"
)

// Two invented joints: one revolute with limits, one continuous (infinite
// position limits).
var testLimits = []sim.JointLimit{
	{Name: "a.j1", Lower: -1, Upper: 2, MaxVelocity: 1.5, MaxAccel: 4},
	{Name: "a.j2", Lower: math.Inf(-1), Upper: math.Inf(1), MaxVelocity: 3, MaxAccel: 10},
}

const testTickS = 0.01

func TestLimitCheckerAcceptsMotionOnTheBounds(t *testing.T) {
	c := NewLimitChecker(testLimits, testTickS)
	c.Seed([]float64{0, 0})
	// Accelerate at exactly a_max until v_max, cruise, then sit on the
	// upper position limit: every bound is met with equality somewhere.
	q := []float64{0, 0}
	v, v1 := 0.0, 0.0
	for k := uint64(1); k < 400; k++ {
		nv := math.Min(v+4*testTickS, 1.5)
		if q[0]+nv*testTickS > 2 {
			break
		}
		v = nv
		q[0] += v * testTickS
		// The continuous joint does the same at its own a_max and v_max.
		v1 = math.Min(v1+10*testTickS, 3)
		q[1] += v1 * testTickS
		if n := c.Check(k, q); n != 0 {
			t.Fatalf("tick %d: %d violations for a motion within bounds: %v", k, n, c.First())
		}
	}
	if v != 1.5 {
		t.Fatalf("test motion never reached v_max (v=%v); the check of the velocity bound's edge did not run", v)
	}
}

// Each kind of violation, made by hand, is caught and named.
func TestLimitCheckerCatchesEachKind(t *testing.T) {
	cases := []struct {
		name  string
		q     []float64 // the target after resting at 0.5, 0
		kind  LimitKind
		joint int
	}{
		{"above upper", []float64{2.0 + 1e-6, 0}, LimitPosition, 0},
		{"below lower", []float64{-1.0 - 1e-6, 0}, LimitPosition, 0},
		{"NaN", []float64{0.5, math.NaN()}, LimitNotFinite, 1},
		{"+Inf", []float64{math.Inf(1), 0}, LimitNotFinite, 0},
	}
	for _, tc := range cases {
		c := NewLimitChecker(testLimits, testTickS)
		c.Seed([]float64{tc.q[0], tc.q[1]})
		// Seed at the target itself so only the position (or finiteness)
		// check can fire.
		if math.IsNaN(tc.q[1]) || math.IsInf(tc.q[0], 0) {
			c.Seed([]float64{0.5, 0})
		}
		c.Check(1, tc.q)
		if c.Count(tc.kind) != 1 || c.First()[0].Joint != tc.joint {
			t.Errorf("%s: counts %v, first %v; want one %s violation on joint %d", tc.name, c.counts, c.First(), tc.kind, tc.joint)
		}
	}

	// Velocity: a step of 1.6 rad/s · h from rest also breaks the
	// acceleration limit (160 rad/s² > 4), so check the velocity alone by
	// building up to 1.5 rad/s first, then stepping at 1.52 rad/s (an
	// acceleration of 2 rad/s², within a_max).
	c := NewLimitChecker(testLimits, testTickS)
	c.Seed([]float64{0, 0})
	q := []float64{0, 0}
	v := 0.0
	k := uint64(0)
	for v < 1.5 {
		v = math.Min(v+4*testTickS, 1.5)
		q[0] += v * testTickS
		k++
		c.Check(k, q)
	}
	if c.Violations() != 0 {
		t.Fatalf("ramp to v_max reported %v", c.First())
	}
	q[0] += 1.52 * testTickS
	k++
	if n := c.Check(k, q); n != 1 || c.Count(LimitVelocity) != 1 {
		t.Errorf("step at 1.52 rad/s (limit 1.5): %d violations %v, want one velocity", n, c.First())
	}
	if got := c.First()[0].Value; math.Abs(got-1.52) > 1e-9 {
		t.Errorf("velocity reported %v, want 1.52", got)
	}

	// Acceleration: from rest, a step of 0.5·a·h² with a = 4.4 rad/s²
	// (10% over) keeps the velocity small (0.044 rad/s).
	c = NewLimitChecker(testLimits, testTickS)
	c.Seed([]float64{0, 0})
	step := 4.4 * testTickS * testTickS
	if n := c.Check(1, []float64{step, 0}); n != 1 || c.Count(LimitAcceleration) != 1 {
		t.Errorf("acceleration 4.4 rad/s² (limit 4): %d violations %v, want one acceleration", n, c.First())
	}
	// Just inside: 3.99 rad/s² passes.
	c = NewLimitChecker(testLimits, testTickS)
	c.Seed([]float64{0, 0})
	if n := c.Check(1, []float64{3.99 * testTickS * testTickS, 0}); n != 0 {
		t.Errorf("acceleration 3.99 rad/s² (limit 4) reported %v", c.First())
	}
	// The continuous joint's acceleration is checked too.
	c = NewLimitChecker(testLimits, testTickS)
	c.Seed([]float64{0, 100})
	if n := c.Check(1, []float64{0, 100 + 11*testTickS*testTickS}); n != 1 || c.First()[0].Joint != 1 {
		t.Errorf("continuous joint at 11 rad/s² (limit 10): %v", c.First())
	}
}

func TestLimitCheckerWithoutSeedChecksPositionsFirst(t *testing.T) {
	c := NewLimitChecker(testLimits, testTickS)
	// A first target far from anything: no history, so no velocity.
	if n := c.Check(1, []float64{1.9, 50}); n != 0 {
		t.Errorf("first unseeded target reported %v", c.First())
	}
	// Second: velocity is known, acceleration not yet.
	if n := c.Check(2, []float64{1.9, 50}); n != 0 {
		t.Errorf("repeated target reported %v", c.First())
	}
	if n := c.Check(3, []float64{1.9 - 0.5, 50}); c.Count(LimitVelocity) != 1 || c.Count(LimitAcceleration) != 1 || n != 2 {
		t.Errorf("a jump of 0.5 rad in one tick: %v, want a velocity and an acceleration violation", c.First())
	}
	if c.Ticks() != 3 {
		t.Errorf("Ticks %d, want 3", c.Ticks())
	}
}
