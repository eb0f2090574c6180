package sim

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// ResidualFunc evaluates a least-squares problem at theta: the residuals
// into r and, when jac is not nil, their Jacobian ∂r/∂θ into jac. An error
// means theta cannot be evaluated (the step fails there); the minimiser
// treats it as a rejected step.
type ResidualFunc func(r []float64, jac *mat.Dense, theta []float64) error

// LMSettings tune LevenbergMarquardt. The zero value means the defaults.
type LMSettings struct {
	// MaxIterations bounds the iterations (each one or more evaluations
	// of residuals and Jacobian); 0 means 50.
	MaxIterations int
	// InitialDamping is λ at the start, relative to the diagonal of JᵀJ;
	// 0 means 1e-3 (Marquardt's scaling).
	InitialDamping float64
	// StepTol stops when an accepted step changes every parameter by at
	// most StepTol·(|θᵢ| + StepTol); 0 means 1e-9.
	StepTol float64
	// CostTol stops when an accepted step lowers the cost by at most
	// CostTol times the cost; 0 means 1e-12.
	CostTol float64
}

// LMResult is the outcome of LevenbergMarquardt.
type LMResult struct {
	Theta       []float64  // the best parameters found
	Residuals   []float64  // at Theta
	Jacobian    *mat.Dense // at Theta
	Cost        float64    // ‖r‖² at Theta
	InitialCost float64    // ‖r‖² at the (projected) start
	Iterations  int
	Evaluations int
	// Interrupted is true when the progress callback asked to stop;
	// Theta is then the best point so far.
	Interrupted bool
	// Reason says why the iterations ended, for a person.
	Reason string
}

// LevenbergMarquardt minimises ‖r(θ)‖² over the box lower ≤ θ ≤ upper
// from theta0 (projected into the box) by the Levenberg–Marquardt method
// (Levenberg 1944; Marquardt 1963): each iteration solves
// (JᵀJ + λ·diag(JᵀJ))·δ = −Jᵀr, with Marquardt's diagonal scaling so the
// parameters' units do not matter, takes θ + δ projected onto the box,
// and accepts it if the cost fell (λ ÷ 10) or rejects it (λ × 10).
// Parameters held at a bound by the gradient are left out of the solve
// (a projected method's active set). progress, if not nil, is called after
// every iteration with the iteration number and the best cost so far;
// returning false stops the fit, which then returns the best point so
// far with Interrupted set. nRes is the number of residuals. It fails only
// if the start cannot be evaluated.
func LevenbergMarquardt(f ResidualFunc, nRes int, theta0, lower, upper []float64, s LMSettings, progress func(iter int, cost float64) bool) (*LMResult, error) {
	n := len(theta0)
	if len(lower) != n || len(upper) != n || n == 0 || nRes < 1 {
		panic("sim: LevenbergMarquardt: bad sizes")
	}
	if s.MaxIterations == 0 {
		s.MaxIterations = 50
	}
	if s.InitialDamping == 0 {
		s.InitialDamping = 1e-3
	}
	if s.StepTol == 0 {
		s.StepTol = 1e-9
	}
	if s.CostTol == 0 {
		s.CostTol = 1e-12
	}
	project := func(th []float64) {
		for i := range th {
			th[i] = math.Min(math.Max(th[i], lower[i]), upper[i])
		}
	}
	res := &LMResult{Theta: append([]float64(nil), theta0...), Residuals: make([]float64, nRes), Jacobian: mat.NewDense(nRes, n, nil)}
	project(res.Theta)
	if err := f(res.Residuals, res.Jacobian, res.Theta); err != nil {
		return nil, fmt.Errorf("at the starting values: %w", err)
	}
	res.Evaluations = 1
	res.Cost = sumSquares(res.Residuals)
	res.InitialCost = res.Cost
	if math.IsNaN(res.Cost) || math.IsInf(res.Cost, 0) {
		return nil, errors.New("at the starting values: residuals are not finite")
	}
	trial := &LMResult{Theta: make([]float64, n), Residuals: make([]float64, nRes), Jacobian: mat.NewDense(nRes, n, nil)}
	lambda := s.InitialDamping
	var jtj mat.SymDense
	g := mat.NewVecDense(n, nil)
	free := make([]int, 0, n)
	res.Reason = "iteration limit"
	for iter := 1; iter <= s.MaxIterations; iter++ {
		res.Iterations = iter
		jtj.SymOuterK(1, res.Jacobian.T())
		g.MulVec(res.Jacobian.T(), mat.NewVecDense(nRes, res.Residuals))
		// Active set: at a bound with the descent direction −g pointing out.
		free = free[:0]
		for i := range n {
			atLower := res.Theta[i] <= lower[i] && g.AtVec(i) > 0
			atUpper := res.Theta[i] >= upper[i] && g.AtVec(i) < 0
			if !atLower && !atUpper {
				free = append(free, i)
			}
		}
		if len(free) == 0 {
			res.Reason = "every parameter is held at a bound"
			break
		}
		accepted := false
		for !accepted {
			delta, ok := dampedStep(&jtj, g, free, lambda)
			if ok {
				copy(trial.Theta, res.Theta)
				for k, i := range free {
					trial.Theta[i] += delta[k]
				}
				project(trial.Theta)
				res.Evaluations++
				if err := f(trial.Residuals, trial.Jacobian, trial.Theta); err == nil {
					trial.Cost = sumSquares(trial.Residuals)
					accepted = trial.Cost < res.Cost
				}
			}
			if !accepted {
				lambda *= 10
				if lambda > 1e16 {
					break
				}
			}
		}
		if !accepted {
			res.Reason = "no step lowers the cost (a minimum to within rounding)"
			break
		}
		lambda = math.Max(lambda/10, 1e-15)
		small := true
		for i := range n {
			if math.Abs(trial.Theta[i]-res.Theta[i]) > s.StepTol*(math.Abs(res.Theta[i])+s.StepTol) {
				small = false
			}
		}
		drop := res.Cost - trial.Cost
		res.Theta, trial.Theta = trial.Theta, res.Theta
		res.Residuals, trial.Residuals = trial.Residuals, res.Residuals
		res.Jacobian, trial.Jacobian = trial.Jacobian, res.Jacobian
		res.Cost = trial.Cost
		if progress != nil && !progress(iter, res.Cost) {
			res.Interrupted = true
			res.Reason = "interrupted"
			break
		}
		if small {
			res.Reason = "the step became negligible"
			break
		}
		if drop <= s.CostTol*res.Cost {
			res.Reason = "the cost stopped falling"
			break
		}
	}
	return res, nil
}

// dampedStep solves (JᵀJ + λ·diag(JᵀJ))_ff δ = −g_f over the free
// parameters f. A zero diagonal entry (a parameter the residuals ignore)
// gets a tiny floor so the system stays solvable.
func dampedStep(jtj *mat.SymDense, g *mat.VecDense, free []int, lambda float64) ([]float64, bool) {
	k := len(free)
	a := mat.NewSymDense(k, nil)
	b := mat.NewVecDense(k, nil)
	var maxDiag float64
	for _, i := range free {
		maxDiag = math.Max(maxDiag, jtj.At(i, i))
	}
	floor := 1e-30 + 1e-15*maxDiag
	for p, i := range free {
		for q := p; q < k; q++ {
			a.SetSym(p, q, jtj.At(i, free[q]))
		}
		a.SetSym(p, p, jtj.At(i, i)+lambda*math.Max(jtj.At(i, i), floor))
		b.SetVec(p, -g.AtVec(i))
	}
	var ch mat.Cholesky
	if !ch.Factorize(a) {
		return nil, false
	}
	var x mat.VecDense
	if err := ch.SolveVecTo(&x, b); err != nil {
		var c mat.Condition // ill-conditioned, still solved: the damping will grow if it misleads
		if !errors.As(err, &c) {
			return nil, false
		}
	}
	return x.RawVector().Data, true
}

func sumSquares(v []float64) float64 {
	var s float64
	for _, x := range v {
		s += x * x
	}
	return s
}
