package mpc

import (
	"math"
	"testing"
)

// TestCorrectionBasis checks the correction B-splines: non-negative
// functions summing to one everywhere (Piegl & Tiller, The NURBS Book,
// §2.2, properties P2.2 and P2.4), clamped ends (δ(0) = d0, δ(T) = last
// knot), degree 1 equal to linear interpolation through the knots, and in
// an interior span of degree 2 the uniform quadratic B-spline's closed
// form ½u², ½(−2u² + 2u + 1), ½(1 − u)² with u the position in the span
// (the standard uniform B-spline, from memory).
func TestCorrectionBasis(t *testing.T) {
	const steps, hp = 20, 0.025
	total := steps * hp
	for _, deg := range []int{1, 2, 3} {
		b := newCorrectionBasis(steps, 6, deg, hp)
		for tau := -0.1; tau <= total+0.1; tau += 0.0037 {
			idx, w, n := b.weightsAt(tau)
			var sum float64
			for k := range n {
				if w[k] < -1e-15 {
					t.Errorf("degree %d at %g: weight %g of %d is negative", deg, tau, w[k], idx[k])
				}
				sum += w[k]
			}
			if math.Abs(sum-1) > 1e-12 {
				t.Errorf("degree %d at %g: weights sum to %g", deg, tau, sum)
			}
		}
		if idx, w, _ := b.weightsAt(0); idx[0] != -1 || w[0] != 1 {
			t.Errorf("degree %d: δ(0) is not d0", deg)
		}
		if idx, w, _ := b.weightsAt(total); idx[0] != 5 || w[0] != 1 {
			t.Errorf("degree %d: δ(T) is not the last knot", deg)
		}
	}
	lin := newCorrectionBasis(steps, 4, 1, hp)
	d0, c := []float64{0.3}, []float64{1, -2, 0.5, 4}
	knotsAt := []float64{0.125, 0.25, 0.375, 0.5}
	for j, tk := range knotsAt {
		if v := lin.valueAt(tk, 0, 1, d0, c); math.Abs(v-c[j]) > 1e-12 {
			t.Errorf("linear: δ(%g) = %g, want knot %g", tk, v, c[j])
		}
		if tk := lin.knotTimeS(j); math.Abs(tk-knotsAt[j]) > 1e-12 {
			t.Errorf("linear: knot %d sits at %g, want %g", j, tk, knotsAt[j])
		}
	}
	if v, want := lin.valueAt(0.0625, 0, 1, d0, c), (0.3+1)/2; math.Abs(v-want) > 1e-12 {
		t.Errorf("linear: half-way to the first knot %g, want %g", v, want)
	}
	// Degree 2, 6 knots: interior knots at T/5 steps; the span [2T/5, 3T/5)
	// is away from the clamped ends.
	quad := newCorrectionBasis(steps, 6, 2, hp)
	span := total / 5
	for _, u := range []float64{0.1, 0.5, 0.9} {
		_, w, n := quad.weightsAt(2*span + u*span)
		want := []float64{(1 - u) * (1 - u) / 2, (-2*u*u + 2*u + 1) / 2, u * u / 2}
		for k := range n {
			if math.Abs(w[k]-want[k]) > 1e-12 {
				t.Errorf("quadratic at u = %g: weight %d is %g, want %g", u, k, w[k], want[k])
			}
		}
	}
}
