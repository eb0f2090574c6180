package sim

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/diff/fd"
)

// A taut string's tension is k times its stretch (Hooke's law) once the
// stretch exceeds half the ramp width; a slack one's is exactly zero.
func TestStringTensionTautAndSlack(t *testing.T) {
	fig := &Figure{Nodes: []Node{{Name: "w", MassKg: 1}}}
	const k, restLen = 250.0, 0.4
	m, err := NewModel(fig, []StringLink{{Node: 0, RestLengthM: restLen, StiffnessNPerM: k}}, ModelSettings{StepS: 0.01})
	if err != nil {
		t.Fatal(err)
	}
	anchors := []float64{0.1, -0.2, 1.0}
	dir := []float64{0.6, 0, -0.8} // unit vector
	at := func(length float64) []float64 {
		return []float64{anchors[0] + length*dir[0], anchors[1] + length*dir[1], anchors[2] + length*dir[2]}
	}
	for _, stretch := range []float64{1e-3, 0.01, 0.05, 0.6 * DefaultSlackWidthM} {
		// The length is computed from coordinates of size ~1 m, so it is
		// uncertain by a few 1e-16 m: allow k·1e-15 m on top of 1e-12 relative.
		if got, want := m.StringTension(0, at(restLen+stretch), anchors), k*stretch; math.Abs(got-want) > 1e-12*want+k*1e-15 {
			t.Errorf("stretch %g m: tension %.15g N, want k·stretch = %.15g N", stretch, got, want)
		}
	}
	for _, slack := range []float64{0.6 * DefaultSlackWidthM, 1e-3, 0.2} {
		if got := m.StringTension(0, at(restLen-slack), anchors); got != 0 {
			t.Errorf("slack by %g m: tension %g N, want 0", slack, got)
		}
	}
	// Inside the ramp the tension rises monotonically from 0 to k·w/2.
	last := 0.0
	for i := 1; i < 100; i++ {
		e := -DefaultSlackWidthM/2 + DefaultSlackWidthM*float64(i)/100
		tension := m.StringTension(0, at(restLen+e), anchors)
		if !(tension > last) || tension > k*DefaultSlackWidthM/2 {
			t.Fatalf("ramp not monotone at stretch %g: %g after %g", e, tension, last)
		}
		last = tension
	}
}

// The ramp's tension is the derivative of its energy and its stiffness the
// derivative of its tension, in the ramp and beyond it (central differences
// from gonum's diff/fd); and tension and stiffness are continuous at the
// ramp's ends (C² tension), checked by evaluating just inside and outside.
func TestStringRampDerivatives(t *testing.T) {
	const k, w = 300.0, 1e-4
	for _, e := range []float64{-0.4 * w, -0.1 * w, 0, 0.3 * w, 0.45 * w, 2 * w, 0.01} {
		phi := func(e float64) float64 { p, _, _ := stringRamp(e, k, w); return p }
		ten := func(e float64) float64 { _, tt, _ := stringRamp(e, k, w); return tt }
		_, tension, kappa := stringRamp(e, k, w)
		s := &fd.Settings{Formula: fd.Central, Step: 1e-4 * w}
		if d := fd.Derivative(phi, e, s); math.Abs(d-tension) > 1e-6*(k*w) {
			t.Errorf("e = %g: dφ/de = %.10g, tension %.10g", e, d, tension)
		}
		if d := fd.Derivative(ten, e, s); math.Abs(d-kappa) > 1e-6*k {
			t.Errorf("e = %g: dT/de = %.10g, stiffness %.10g", e, d, kappa)
		}
	}
	for _, edge := range []float64{-w / 2, w / 2} {
		p1, t1, k1 := stringRamp(edge-1e-12, k, w)
		p2, t2, k2 := stringRamp(edge+1e-12, k, w)
		if math.Abs(p1-p2) > 1e-12 || math.Abs(t1-t2) > 1e-8 || math.Abs(k1-k2) > 1e-5 {
			t.Errorf("ramp discontinuous at %g: φ %g/%g T %g/%g κ %g/%g", edge, p1, p2, t1, t2, k1, k2)
		}
	}
}

// Energy counts kinetic energy from the finite-difference velocity and
// gravity, rod and string potentials: checked on a hand-computed case.
func TestEnergyByHand(t *testing.T) {
	fig := &Figure{
		Nodes: []Node{
			{Name: "top", MassKg: 5, PositionM: [3]float64{0, 0, 3}, Anchored: true},
			{Name: "bob", MassKg: 2, PositionM: [3]float64{0, 0, 2}},
		},
		Rods: []Rod{{A: 0, B: 1, RestLengthM: 0.5, StiffnessNPerM: 40}},
	}
	m, err := NewModel(fig, []StringLink{{Node: 1, RestLengthM: 1, StiffnessNPerM: 10}}, ModelSettings{StepS: 0.1, GravityMPerS2: 10})
	if err != nil {
		t.Fatal(err)
	}
	// The anchored node's entries (here 99) are ignored.
	x := []float64{99, 99, 99, 0, 0, 2}
	xPrev := []float64{99, 99, 99, 0, 0.03, 2.04} // v = (0, −0.3, −0.4), |v| = 0.5 m/s
	anchors := []float64{0, 0, 0.8}               // string length 1.2: stretch 0.2
	kin, pot := m.Energy(x, xPrev, anchors)
	wantKin := 0.5 * 2 * 0.25
	// gravity 2·10·2 = 40; rod ½·40·0.5² = 5; string ½·10·0.2² + 10·w²/40.
	wantPot := 40 + 5 + 0.5*10*0.04 + 10*DefaultSlackWidthM*DefaultSlackWidthM/40
	if math.Abs(kin-wantKin) > 1e-12 || math.Abs(pot-wantPot) > 1e-12 {
		t.Errorf("energy (%.15g, %.15g) J, want (%.15g, %.15g) J", kin, pot, wantKin, wantPot)
	}
}
