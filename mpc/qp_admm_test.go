package mpc

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// admmQP is a plain dense ADMM for the same QP, written only to compare
// against: the operator-splitting iteration of OSQP (Stellato, Banjac,
// Goulart, Bemporad & Boyd, "OSQP: an operator splitting solver for
// quadratic programs", Math. Programming Computation 12, 2020, Algorithm 1)
// with a fixed step ρ, σ = 1e-6 and over-relaxation α = 1.6, the constraint
// matrix A = [C; I] and the KKT system reduced to the SPD matrix
// H + σI + ρAᵀA, factorised once with gonum mat.Cholesky. It is the
// measurement behind the choice of an active-set method (see
// BenchmarkQPADMM48x192) and a second, independent solver for
// TestQPAgreesWithADMM.
type admmQP struct {
	n, m       int
	a          *mat.Dense // (m+n)×n
	l, u       []float64
	chol       mat.Cholesky
	rho, sigma float64
	x, z, y    *mat.VecDense
	xt, zt     *mat.VecDense
	rhs, tmp   *mat.VecDense
	ax, aty    *mat.VecDense
	hx         *mat.VecDense
}

func newADMMQP(qp *QP, rho float64) *admmQP {
	n := len(qp.G)
	m := len(qp.Lo)
	s := &admmQP{n: n, m: m, rho: rho, sigma: 1e-6}
	s.a = mat.NewDense(m+n, n, nil)
	if m > 0 {
		s.a.Slice(0, m, 0, n).(*mat.Dense).Copy(qp.C)
	}
	s.l, s.u = make([]float64, m+n), make([]float64, m+n)
	copy(s.l, qp.Lo)
	copy(s.u, qp.Hi)
	for j := range n {
		s.a.Set(m+j, j, 1)
		s.l[m+j], s.u[m+j] = math.Inf(-1), math.Inf(1)
		if qp.LB != nil {
			s.l[m+j] = qp.LB[j]
		}
		if qp.UB != nil {
			s.u[m+j] = qp.UB[j]
		}
	}
	k := mat.NewSymDense(n, nil)
	k.SymOuterK(rho, s.a.T())
	for i := range n {
		for j := i; j < n; j++ {
			v := k.At(i, j) + qp.H.At(i, j)
			if i == j {
				v += s.sigma
			}
			k.SetSym(i, j, v)
		}
	}
	if !s.chol.Factorize(k) {
		panic("admm: KKT matrix not positive definite")
	}
	s.x, s.xt, s.rhs, s.tmp, s.aty, s.hx = mat.NewVecDense(n, nil), mat.NewVecDense(n, nil), mat.NewVecDense(n, nil), mat.NewVecDense(n, nil), mat.NewVecDense(n, nil), mat.NewVecDense(n, nil)
	s.z, s.y, s.zt, s.ax = mat.NewVecDense(m+n, nil), mat.NewVecDense(m+n, nil), mat.NewVecDense(m+n, nil), mat.NewVecDense(m+n, nil)
	return s
}

// solve runs ADMM until the primal residual ‖Ax − z‖∞ and the dual
// residual ‖Hx + g + Aᵀy‖∞ are both below eps, or maxIter iterations. With
// warm set it starts from the previous x, z, y.
func (s *admmQP) solve(qp *QP, eps float64, maxIter int, warm bool) (iterations int, converged bool) {
	const alpha = 1.6
	n, mn := s.n, s.m+s.n
	g := mat.NewVecDense(n, qp.G)
	if !warm {
		s.x.Zero()
		s.z.Zero()
		s.y.Zero()
	}
	for it := 1; it <= maxIter; it++ {
		// rhs = σx − g + Aᵀ(ρz − y)
		s.tmp.Zero()
		zy := s.zt // scratch of length m+n
		for i := range mn {
			zy.SetVec(i, s.rho*s.z.AtVec(i)-s.y.AtVec(i))
		}
		s.rhs.MulVec(s.a.T(), zy)
		for j := range n {
			s.rhs.SetVec(j, s.rhs.AtVec(j)+s.sigma*s.x.AtVec(j)-g.AtVec(j))
		}
		if err := s.chol.SolveVecTo(s.xt, s.rhs); err != nil {
			panic(err)
		}
		s.ax.MulVec(s.a, s.xt) // z̃ = A x̃
		for j := range n {
			s.x.SetVec(j, alpha*s.xt.AtVec(j)+(1-alpha)*s.x.AtVec(j))
		}
		for i := range mn {
			zr := alpha*s.ax.AtVec(i) + (1-alpha)*s.z.AtVec(i)
			zNew := math.Min(math.Max(zr+s.y.AtVec(i)/s.rho, s.l[i]), s.u[i])
			s.y.SetVec(i, s.y.AtVec(i)+s.rho*(zr-zNew))
			s.z.SetVec(i, zNew)
		}
		// Residuals.
		s.ax.MulVec(s.a, s.x)
		prim := 0.0
		for i := range mn {
			prim = math.Max(prim, math.Abs(s.ax.AtVec(i)-s.z.AtVec(i)))
		}
		s.hx.MulVec(qp.H, s.x)
		s.aty.MulVec(s.a.T(), s.y)
		dual := 0.0
		for j := range n {
			dual = math.Max(dual, math.Abs(s.hx.AtVec(j)+g.AtVec(j)+s.aty.AtVec(j)))
		}
		if prim <= eps && dual <= eps {
			return it, true
		}
	}
	return maxIter, false
}

// TestQPAgreesWithADMM compares the active-set optimum with the ADMM
// reference above on planner-sized problems (n = 48, m = 192), where brute
// force is out of reach. ADMM is run to residuals of 1e-9, which bounds its
// objective error to about 1e-8 relative for these well-scaled problems
// (the objective error of an ε-KKT point is O(ε·‖z‖·‖multipliers‖); from
// the OSQP paper's termination analysis, §3.4); the check allows 1e-7.
func TestQPAgreesWithADMM(t *testing.T) {
	rng := rand.New(rand.NewPCG(31, 7))
	var problem plannerLikeQP
	problem.init(rng, 48, 192)
	s := NewQPSolver(48, 192, QPSettings{})
	z := make([]float64, 48)
	for trial := range 3 {
		qp := problem.next(rng)
		res, err := s.Solve(z, qp, false)
		if err != nil {
			t.Fatal(err)
		}
		admm := newADMMQP(qp, 1)
		it, ok := admm.solve(qp, 1e-9, 200000, false)
		if !ok {
			t.Fatalf("trial %d: ADMM reference did not converge in %d iterations", trial, it)
		}
		ref := qpObjective(qp, admm.x.RawVector().Data)
		if math.Abs(res.Objective-ref) > 1e-7*(1+math.Abs(ref)) {
			t.Errorf("trial %d: objective %.12g, ADMM %.12g", trial, res.Objective, ref)
		}
		t.Logf("trial %d: objective %.10g, ADMM %.10g after %d iterations", trial, res.Objective, ref, it)
	}
}

// BenchmarkQPADMM48x192 solves the same drifting planner-like problems as
// BenchmarkQPWarm48x192 with the ADMM above, warm-started, to residuals
// 1e-8 (the accuracy the KKT test asks of the active-set solver) and to
// 1e-4 (a typical real-time setting), reporting iterations per solve.
func BenchmarkQPADMM48x192(b *testing.B) {
	for _, eps := range []float64{1e-4, 1e-8} {
		name := "eps1e-4"
		if eps < 1e-6 {
			name = "eps1e-8"
		}
		b.Run(name, func(b *testing.B) {
			rng := rand.New(rand.NewPCG(11, 13))
			var problem plannerLikeQP
			problem.init(rng, 48, 192)
			gs := make([][]float64, 16)
			for k := range gs {
				gs[k] = append([]float64(nil), problem.next(rng).G...)
			}
			qp := &problem.qp
			admm := newADMMQP(qp, 1)
			total, k := 0, 0
			for b.Loop() {
				copy(qp.G, gs[k%len(gs)])
				it, ok := admm.solve(qp, eps, 100000, k > 0)
				if !ok {
					b.Fatalf("ADMM did not converge to %g", eps)
				}
				total += it
				k++
			}
			b.ReportMetric(float64(total)/float64(k), "iterations/op")
		})
	}
}
