package mpc

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/diff/fd"
	"gonum.org/v1/gonum/interp"
)

// randomKnots returns n strictly increasing knots from t0 with gaps in
// [0.2, 2) s, uneven on purpose.
func randomKnots(rnd *rand.Rand, n int, t0 float64) []float64 {
	k := make([]float64, n)
	k[0] = t0
	for i := 1; i < n; i++ {
		k[i] = k[i-1] + 0.2 + 1.8*rnd.Float64()
	}
	return k
}

// closeTo reports |got − want| ≤ tol·(1 + |want|).
func closeTo(got, want, tol float64) bool {
	return math.Abs(got-want) <= tol*(1+math.Abs(want))
}

// A complete (clamped) cubic spline interpolant reproduces every cubic
// polynomial exactly when its end slopes are the polynomial's: the cubic
// lies in the spline space and the interpolant is unique there (de Boor,
// A Practical Guide to Splines, chapter IV, complete cubic spline
// interpolation; its error bound is proportional to the fourth derivative,
// zero for a cubic). Tolerance 1e-10 relative: only rounding in the
// tridiagonal solve on values of order 10³ remains.
func TestSplineReproducesCubic(t *testing.T) {
	rnd := rand.New(rand.NewPCG(4, 1))
	for _, n := range []int{2, 3, 4, 7, 25} {
		const channels = 3
		knots := randomKnots(rnd, n, -1+2*rnd.Float64())
		var coef [channels][4]float64
		for j := range coef {
			for k := range coef[j] {
				coef[j][k] = -2 + 4*rnd.Float64()
			}
		}
		p := func(j int, x float64) (pos, vel, acc float64) {
			c := coef[j]
			return c[0] + x*(c[1]+x*(c[2]+x*c[3])), c[1] + x*(2*c[2]+3*x*c[3]), 2*c[2] + 6*x*c[3]
		}
		values := make([]float64, n*channels)
		for i, x := range knots {
			for j := 0; j < channels; j++ {
				values[i*channels+j], _, _ = p(j, x)
			}
		}
		s0, s1 := make([]float64, channels), make([]float64, channels)
		for j := 0; j < channels; j++ {
			_, s0[j], _ = p(j, knots[0])
			_, s1[j], _ = p(j, knots[n-1])
		}
		sp, err := fitClampedSpline(knots, values, channels, s0, s1)
		if err != nil {
			t.Fatal(err)
		}
		pos, vel, acc := make([]float64, channels), make([]float64, channels), make([]float64, channels)
		const samples = 200
		for k := 0; k <= samples; k++ {
			x := knots[0] + (knots[n-1]-knots[0])*float64(k)/samples
			sp.positionTo(pos, x)
			sp.velocityTo(vel, x)
			sp.accelTo(acc, x)
			for j := 0; j < channels; j++ {
				wp, wv, wa := p(j, x)
				if !closeTo(pos[j], wp, 1e-10) || !closeTo(vel[j], wv, 1e-10) || !closeTo(acc[j], wa, 1e-10) {
					t.Fatalf("n=%d channel %d t=%g: spline (%g, %g, %g), cubic (%g, %g, %g)", n, j, x, pos[j], vel[j], acc[j], wp, wv, wa)
				}
			}
		}
	}
}

// C² continuity at interior knots: the left limit (previous segment at its
// full length) and the right value (next segment at 0) of the first and
// second derivatives agree. The moment equations make this hold exactly in
// exact arithmetic (de Boor, chapter IV); 1e-9 relative leaves room for
// rounding on data of order 1 with uneven knots.
func TestSplineC2AtKnots(t *testing.T) {
	rnd := rand.New(rand.NewPCG(4, 2))
	const n, channels = 30, 4
	knots := randomKnots(rnd, n, 0)
	values := make([]float64, n*channels)
	for i := range values {
		values[i] = -1 + 2*rnd.Float64()
	}
	sp, err := fitClampedSpline(knots, values, channels, nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	for i := 1; i < n-1; i++ {
		hPrev := knots[i] - knots[i-1]
		for j := 0; j < channels; j++ {
			lp, lv, la := sp.segmentEval(i-1, j, hPrev)
			rp, rv, ra := sp.segmentEval(i, j, 0)
			if !closeTo(lp, rp, 1e-9) || !closeTo(lv, rv, 1e-9) || !closeTo(la, ra, 1e-9) {
				t.Errorf("knot %d channel %d: left (%g, %g, %g) right (%g, %g, %g)", i, j, lp, lv, la, rp, rv, ra)
			}
			if rp != values[i*channels+j] {
				t.Errorf("knot %d channel %d: spline %g does not pass through the data %g", i, j, rp, values[i*channels+j])
			}
		}
	}
}

// The clamped end conditions hold: the first derivative at the first and
// last knot is the prescribed slope (zero when nil, the cue's case).
func TestSplineEndConditions(t *testing.T) {
	rnd := rand.New(rand.NewPCG(4, 3))
	const n, channels = 6, 2
	knots := randomKnots(rnd, n, 3)
	values := make([]float64, n*channels)
	for i := range values {
		values[i] = -1 + 2*rnd.Float64()
	}
	for _, slopes := range [][2][]float64{{nil, nil}, {{0.7, -1.3}, {-0.4, 2.1}}} {
		sp, err := fitClampedSpline(knots, values, channels, slopes[0], slopes[1])
		if err != nil {
			t.Fatal(err)
		}
		for j := 0; j < channels; j++ {
			want0, want1 := 0.0, 0.0
			if slopes[0] != nil {
				want0, want1 = slopes[0][j], slopes[1][j]
			}
			_, v0, _ := sp.segmentEval(0, j, 0)
			_, v1, _ := sp.segmentEval(n-2, j, knots[n-1]-knots[n-2])
			// 1e-12 relative: the start slope is stored coefficient b of
			// segment 0; the end slope is a sum of four rounded terms.
			if !closeTo(v0, want0, 1e-12) || !closeTo(v1, want1, 1e-12) {
				t.Errorf("channel %d: end slopes %g, %g, want %g, %g", j, v0, v1, want0, want1)
			}
		}
	}
}

// Against the reference library: gonum's interp.ClampedCubic fits the same
// spline (zero first derivative at both ends) one channel at a time, with
// its own banded solver. Position and velocity must agree; gonum offers no
// second derivative, so acceleration is checked against finite differences
// below. 1e-9 relative: two different solvers' rounding on order-1 data.
func TestSplineMatchesGonumClampedCubic(t *testing.T) {
	rnd := rand.New(rand.NewPCG(4, 4))
	for _, n := range []int{2, 3, 5, 40} {
		const channels = 3
		knots := randomKnots(rnd, n, 0.5)
		values := make([]float64, n*channels)
		for i := range values {
			values[i] = -3 + 6*rnd.Float64()
		}
		sp, err := fitClampedSpline(knots, values, channels, nil, nil)
		if err != nil {
			t.Fatal(err)
		}
		pos, vel := make([]float64, channels), make([]float64, channels)
		for j := 0; j < channels; j++ {
			ys := make([]float64, n)
			for i := range ys {
				ys[i] = values[i*channels+j]
			}
			var ref interp.ClampedCubic
			if err := ref.Fit(knots, ys); err != nil {
				t.Fatal(err)
			}
			for k := 0; k <= 500; k++ {
				x := knots[0] + (knots[n-1]-knots[0])*float64(k)/500
				sp.positionTo(pos, x)
				sp.velocityTo(vel, x)
				if wp, wv := ref.Predict(x), ref.PredictDerivative(x); !closeTo(pos[j], wp, 1e-9) || !closeTo(vel[j], wv, 1e-9) {
					t.Fatalf("n=%d channel %d t=%g: (%g, %g), gonum interp (%g, %g)", n, j, x, pos[j], vel[j], wp, wv)
				}
			}
		}
	}
}

// Velocity and acceleration are the derivatives of position and velocity:
// checked with gonum's diff/fd central differences inside segments. The
// central formula is exact for quadratics (velocity) and has error
// step² times a sixth of the third derivative for a cubic; with step 1e-5 s
// and a third derivative below 10³ that is about 2e-8, plus rounding of
// about 1e-16/1e-5; tolerance 1e-6.
func TestSplineDerivativesMatchFiniteDifferences(t *testing.T) {
	rnd := rand.New(rand.NewPCG(4, 5))
	const n, channels = 8, 2
	knots := randomKnots(rnd, n, 0)
	values := make([]float64, n*channels)
	for i := range values {
		values[i] = -1 + 2*rnd.Float64()
	}
	sp, err := fitClampedSpline(knots, values, channels, nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	buf := make([]float64, channels)
	settings := &fd.Settings{Formula: fd.Central, Step: 1e-5}
	for j := 0; j < channels; j++ {
		posOf := func(x float64) float64 { sp.positionTo(buf, x); return buf[j] }
		velOf := func(x float64) float64 { sp.velocityTo(buf, x); return buf[j] }
		accOf := func(x float64) float64 { sp.accelTo(buf, x); return buf[j] }
		for i := 0; i+1 < n; i++ {
			for _, f := range []float64{0.1, 0.37, 0.5, 0.81} {
				x := knots[i] + f*(knots[i+1]-knots[i])
				if got, want := velOf(x), fd.Derivative(posOf, x, settings); !closeTo(got, want, 1e-6) {
					t.Errorf("channel %d t=%g: velocity %g, finite difference %g", j, x, got, want)
				}
				if got, want := accOf(x), fd.Derivative(velOf, x, settings); !closeTo(got, want, 1e-6) {
					t.Errorf("channel %d t=%g: acceleration %g, finite difference %g", j, x, got, want)
				}
			}
		}
	}
}

// Outside the knots the spline holds the end values at rest.
func TestSplineHoldsOutside(t *testing.T) {
	knots := []float64{1, 2, 4}
	values := []float64{0.5, -1, 2, 3, 1, 1}
	sp, err := fitClampedSpline(knots, values, 2, nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	pos, vel, acc := make([]float64, 2), make([]float64, 2), make([]float64, 2)
	for _, c := range []struct {
		t    float64
		want []float64
	}{{0, values[0:2]}, {math.Inf(-1), values[0:2]}, {5, values[4:6]}, {math.Inf(1), values[4:6]}} {
		sp.positionTo(pos, c.t)
		sp.velocityTo(vel, c.t)
		sp.accelTo(acc, c.t)
		for j := range pos {
			if pos[j] != c.want[j] || vel[j] != 0 || acc[j] != 0 {
				t.Errorf("t=%g channel %d: (%g, %g, %g), want (%g, 0, 0)", c.t, j, pos[j], vel[j], acc[j], c.want[j])
			}
		}
	}
}

func TestSplineSegmentSearch(t *testing.T) {
	knots := []float64{0, 1, 2.5, 3, 7}
	sp, err := fitClampedSpline(knots, []float64{0, 1, 0, 1, 0}, 1, nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		t    float64
		want int
	}{{0, 0}, {0.999, 0}, {1, 1}, {2.4, 1}, {2.5, 2}, {3, 3}, {6.9, 3}, {7, 3}} {
		if got := sp.segment(c.t); got != c.want {
			t.Errorf("segment(%g) = %d, want %d", c.t, got, c.want)
		}
	}
}

func TestSplineOverflowIsAnError(t *testing.T) {
	_, err := fitClampedSpline([]float64{0, 1e-300}, []float64{0, 1e300}, 1, nil, nil)
	if err == nil {
		t.Fatal("a spline with overflowing coefficients loaded without error")
	}
}
