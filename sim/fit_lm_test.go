package sim

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/optimize"
)

// expDecay is a small invented least-squares problem: y = a·exp(−b·t) + c
// sampled at 20 times, with a fixed deterministic wobble as "noise".
func expDecay() (ResidualFunc, int) {
	const n = 20
	ts, ys := make([]float64, n), make([]float64, n)
	for i := range n {
		ts[i] = 0.25 * float64(i)
		ys[i] = 2*math.Exp(-0.7*ts[i]) + 0.3 + 0.01*math.Sin(7*float64(i))
	}
	f := func(r []float64, jac *mat.Dense, th []float64) error {
		for i, t := range ts {
			e := math.Exp(-th[1] * t)
			r[i] = th[0]*e + th[2] - ys[i]
			if jac != nil {
				jac.Set(i, 0, e)
				jac.Set(i, 1, -th[0]*t*e)
				jac.Set(i, 2, 1)
			}
		}
		return nil
	}
	return f, n
}

// LevenbergMarquardt reaches the minimum gonum's optimize (BFGS on the same
// sum of squares, the reference library) finds, to 1e-6 in each parameter
// (both stop on small gradients; the problem is well conditioned).
func TestLevenbergMarquardtAgainstGonumOptimize(t *testing.T) {
	f, n := expDecay()
	inf := math.Inf(1)
	res, err := LevenbergMarquardt(f, n, []float64{1, 1, 0}, []float64{-inf, -inf, -inf}, []float64{inf, inf, inf}, LMSettings{}, nil)
	if err != nil {
		t.Fatal(err)
	}
	r := make([]float64, n)
	jac := mat.NewDense(n, 3, nil)
	prob := optimize.Problem{
		Func: func(x []float64) float64 { f(r, nil, x); return sumSquares(r) },
		Grad: func(g, x []float64) {
			f(r, jac, x)
			mat.NewVecDense(3, g).MulVec(jac.T(), mat.NewVecDense(n, r))
			for i := range g {
				g[i] *= 2
			}
		},
	}
	want, err := optimize.Minimize(prob, []float64{1, 1, 0}, &optimize.Settings{GradientThreshold: 1e-12}, &optimize.BFGS{})
	if err != nil {
		t.Fatal(err)
	}
	for i := range 3 {
		if math.Abs(res.Theta[i]-want.X[i]) > 1e-6 {
			t.Errorf("θ%d = %.9g, gonum optimize %.9g", i, res.Theta[i], want.X[i])
		}
	}
	if res.Cost > want.F*(1+1e-9) {
		t.Errorf("cost %.9g above gonum optimize's %.9g", res.Cost, want.F)
	}
}

// A bound that cuts the minimum holds the parameter at the bound, and the
// others reach the minimum with that parameter fixed (compared with an
// unbounded fit of the rest, from memory of what projection must give).
func TestLevenbergMarquardtBounds(t *testing.T) {
	f, n := expDecay()
	inf := math.Inf(1)
	res, err := LevenbergMarquardt(f, n, []float64{1, 1, 0}, []float64{-inf, -inf, -inf}, []float64{inf, 0.5, inf}, LMSettings{}, nil)
	if err != nil {
		t.Fatal(err)
	}
	if res.Theta[1] != 0.5 {
		t.Fatalf("b = %v, want the bound 0.5", res.Theta[1])
	}
	fixed := func(r []float64, jac *mat.Dense, th []float64) error {
		full := mat.NewDense(n, 3, nil)
		if err := f(r, full, []float64{th[0], 0.5, th[1]}); err != nil {
			return err
		}
		if jac != nil {
			for i := range n {
				jac.Set(i, 0, full.At(i, 0))
				jac.Set(i, 1, full.At(i, 2))
			}
		}
		return nil
	}
	want, err := LevenbergMarquardt(fixed, n, []float64{1, 0}, []float64{-inf, -inf}, []float64{inf, inf}, LMSettings{}, nil)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(res.Theta[0]-want.Theta[0]) > 1e-7 || math.Abs(res.Theta[2]-want.Theta[1]) > 1e-7 {
		t.Errorf("free parameters %v, %v; with b fixed at the bound %v", res.Theta[0], res.Theta[2], want.Theta)
	}
}

// Stopping from the progress callback returns the best point so far: its
// cost is the one last reported, below the start's.
func TestLevenbergMarquardtInterrupt(t *testing.T) {
	f, n := expDecay()
	inf := math.Inf(1)
	var last float64
	calls := 0
	res, err := LevenbergMarquardt(f, n, []float64{1, 1, 0}, []float64{-inf, -inf, -inf}, []float64{inf, inf, inf}, LMSettings{}, func(iter int, cost float64) bool {
		calls++
		last = cost
		return iter < 2
	})
	if err != nil {
		t.Fatal(err)
	}
	if !res.Interrupted || calls != 2 || res.Iterations != 2 {
		t.Fatalf("interrupted %v after %d calls, %d iterations; want after 2", res.Interrupted, calls, res.Iterations)
	}
	r := make([]float64, n)
	f(r, nil, res.Theta)
	if c := sumSquares(r); c != last || c != res.Cost || !(c < res.InitialCost) {
		t.Errorf("cost at the returned point %v, reported %v, result %v, start %v", c, last, res.Cost, res.InitialCost)
	}
}

// Two nearly proportional columns are named as one undetermined direction
// and get infinite standard errors; an independent orthogonal column gets
// the textbook σ/‖column‖ (Seber and Wild 1989, ch. 2: the diagonal of
// σ²(JᵀJ)⁻¹ for an orthogonal column).
func TestFitStatisticsUndetermined(t *testing.T) {
	const m = 40
	jac := mat.NewDense(m, 3, nil)
	r := make([]float64, m)
	for i := range m {
		a := math.Sin(float64(i))
		jac.Set(i, 0, a)
		jac.Set(i, 1, 2*a+1e-9*math.Cos(3*float64(i)))
		jac.Set(i, 2, float64(1-2*(i%2))) // ±1, made orthogonal to column 0 below
		r[i] = 0.01 * math.Cos(5*float64(i))
	}
	// Make column 2 exactly orthogonal to column 0 (Gram–Schmidt).
	c0, c2 := mat.Col(nil, 0, jac), mat.Col(nil, 2, jac)
	p := dot(c0, c2) / dot(c0, c0)
	for i := range m {
		jac.Set(i, 2, c2[i]-p*c0[i])
	}
	st, err := FitStatistics(jac, r, nil, FitStatsSettings{})
	if err != nil {
		t.Fatal(err)
	}
	if len(st.Undetermined) != 1 || len(st.Undetermined[0]) != 2 {
		t.Fatalf("undetermined directions %v, want one made of parameters 0 and 1", st.Undetermined)
	}
	if !math.IsInf(st.StdErr[0], 1) || !math.IsInf(st.StdErr[1], 1) {
		t.Errorf("standard errors %v, want +Inf for 0 and 1", st.StdErr)
	}
	c2 = mat.Col(nil, 2, jac)
	sigma2 := sumSquares(r) / float64(m-3)
	want := math.Sqrt(sigma2 / dot(c2, c2))
	if math.Abs(st.StdErr[2]-want) > 1e-9*want {
		t.Errorf("standard error of the orthogonal column %.12g, want %.12g", st.StdErr[2], want)
	}
}

// A parameter whose column is tiny for the noise (its standard error, σ
// over the column's length for an orthogonal column, is many times its
// typical size) is named undetermined although no column is dependent;
// with a typical size large enough it is not.
func TestFitStatisticsWeakForTheNoise(t *testing.T) {
	const m = 40
	jac := mat.NewDense(m, 2, nil)
	r := make([]float64, m)
	for i := range m {
		jac.Set(i, 0, 1)
		jac.Set(i, 1, 1e-4*float64(1-2*(i%2))) // orthogonal to column 0 (m even)
		r[i] = 0.01 * math.Cos(5*float64(i))
	}
	st, err := FitStatistics(jac, r, []float64{1, 1}, FitStatsSettings{})
	if err != nil {
		t.Fatal(err)
	}
	se := math.Sqrt(sumSquares(r)/float64(m-2)) / (1e-4 * math.Sqrt(m))
	if len(st.Undetermined) != 1 || len(st.Undetermined[0]) != 1 || st.Undetermined[0][0] != 1 {
		t.Fatalf("undetermined %v, want parameter 1 alone (its standard error %.3g)", st.Undetermined, se)
	}
	if math.Abs(st.StdErr[1]-se) > 1e-9*se {
		t.Errorf("standard error %.12g, want %.12g", st.StdErr[1], se)
	}
	st, err = FitStatistics(jac, r, []float64{1, 10 * se}, FitStatsSettings{})
	if err != nil {
		t.Fatal(err)
	}
	if len(st.Undetermined) != 0 {
		t.Errorf("undetermined %v with a typical size 10 standard errors", st.Undetermined)
	}
}
