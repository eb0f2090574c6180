package mpc

import (
	"errors"
	"math"

	"gonum.org/v1/gonum/blas"
	gonumlapack "gonum.org/v1/gonum/lapack/gonum"
	"gonum.org/v1/gonum/mat"
)

// QP is a dense convex quadratic programme
//
//	minimise   ½ zᵀHz + gᵀz
//	subject to Lo ≤ C z ≤ Hi   (m general rows)
//	           LB ≤ z ≤ UB     (n simple bounds)
//
// H must be symmetric positive definite (the planner adds regularisation).
// A missing side is −Inf or +Inf; Lo[i] == Hi[i] makes row i an equality.
// C may be nil when there are no rows; LB and UB may be nil for no bounds.
type QP struct {
	H      *mat.SymDense
	G      []float64
	C      *mat.Dense
	Lo, Hi []float64
	LB, UB []float64
}

// QPSettings tunes the solver. The zero value means the documented defaults.
type QPSettings struct {
	// MaxIterations caps the active-set changes (additions and removals)
	// per solve. Zero means 5·(n+m) + 50.
	MaxIterations int
	// FeasibilityTol: a constraint counts as violated when it is violated by
	// more than FeasibilityTol·(1 + |bound| + Σⱼ|cᵢⱼ|·maxⱼ|zⱼ|). Zero means
	// 1e-11.
	FeasibilityTol float64
}

// QPSide says which side of a two-sided constraint is active.
type QPSide int8

const (
	QPInactive QPSide = 0
	QPAtLower  QPSide = -1
	QPAtUpper  QPSide = 1
	// QPFixed marks an active equality row or a bound with LB == UB.
	QPFixed QPSide = 2
)

// QPResult describes a solution. Its slices belong to the solver and are
// overwritten by the next solve.
type QPResult struct {
	// Iterations counts active-set changes, including the removals made
	// while checking a warm-start set.
	Iterations int
	// Objective is ½ zᵀHz + gᵀz at the solution.
	Objective float64
	// RowMult (y, length m) and BoundMult (w, length n) are the Lagrange
	// multipliers in the convention
	//	H z + g + Cᵀy + w = 0,
	// with yᵢ > 0 only at the upper side of row i and yᵢ < 0 only at the
	// lower side (free sign for equalities), and likewise w for the bounds.
	RowMult, BoundMult []float64
	// RowSide and BoundSide give the active set.
	RowSide, BoundSide []QPSide
	// Ignored counts violated constraints set aside because they depend on
	// the active ones and are violated by no more than 1e-6 relative: in
	// exact arithmetic they hold at a degenerate optimum, and only rounding
	// (amplified by an ill-conditioned H) makes them look violated. A
	// larger violation of that kind is reported as ErrQPInfeasible.
	Ignored int
}

var (
	// ErrQPInfeasible: the constraints admit no point (the dual is
	// unbounded), or a lower side exceeds its upper side.
	ErrQPInfeasible = errors.New("mpc: qp: constraints are infeasible")
	// ErrQPIterationLimit: MaxIterations active-set changes were not enough.
	// z then holds the last iterate: the minimiser subject to the
	// constraints active so far, which may violate others.
	ErrQPIterationLimit = errors.New("mpc: qp: iteration limit reached")
	// ErrQPNotConvex: H is not numerically positive definite.
	ErrQPNotConvex = errors.New("mpc: qp: H is not positive definite")
	// ErrQPNotFinite: the data contain NaN or Inf where a number is needed.
	ErrQPNotFinite = errors.New("mpc: qp: NaN or Inf in the data")
)

// QPSolver solves QPs of one size with the dual active-set method of
// Goldfarb and Idnani (Math. Programming 27, 1983), in the numerically
// stable form that keeps J = L⁻ᵀQ and the triangular R of the active
// normals (L Lᵀ = H, L⁻¹N = Q[R; 0]) and updates both with Givens rotations.
// The method starts from the unconstrained minimum, adds the most violated
// constraint and removes constraints whose multipliers would turn negative,
// so every iterate is dual feasible and the first primal feasible one is
// optimal; an unbounded dual step proves the constraints infeasible.
//
// Warm start: the active set of the previous solve (or one the caller
// edits through WarmSet) is factorised first, its equality-constrained
// minimum computed, and constraints with negative multipliers removed until
// the point is dual feasible; the method then continues as usual. When the
// active set did not change the solve takes no iterations.
//
// Split for a real-time iteration: Factorize(H) and PrepareWarm(qp) need
// only H and C and may run before the observation; SolveFactorized then
// does the rest once g (and the bounds) are known.
//
// Accuracy: every successful solve ends with one step of iterative
// refinement on the final active set, which brings the KKT residuals to
// about 1e-12 relative on the tests' problems. Limits: the method needs H
// well enough conditioned for its Cholesky factor; on massively degenerate
// problems (about 3n constraints tight at one vertex) with cond(H) ≥ 3e8,
// stress runs saw about one solve in 500 report ErrQPInfeasible wrongly.
// Keep cond(H) below about 1e8 (the planner's regularisation does).
//
// All workspace is allocated by NewQPSolver; nothing allocates afterwards.
type QPSolver struct {
	n, m     int
	settings QPSettings

	factorized bool
	warmReady  bool      // PrepareWarm has built J, R for the warm set
	j0         []float64 // L⁻ᵀ from Factorize, column-major
	j          []float64 // J, column-major: column k is j[k*n:(k+1)*n]
	r          []float64 // R, column-major, upper triangular, q×q used

	active []int32   // active constraint codes, q of them; code = 2·i + side
	u      []float64 // multipliers of the active constraints, ≥ 0 except equalities
	q      int

	d, zs, rdir []float64
	rowNorm     []float64 // Euclidean norm of each row of C
	rowAbs      []float64 // 1-norm of each row of C
	rowNNZ      []int32   // number of non-zeros of each row, or −1 for a dense row
	rowIdx      []int32   // column indices of the non-zeros, n per row
	rowSide     []QPSide  // current active set (by row)
	boundSide   []QPSide
	warmRow     []QPSide // warm-start active set
	warmBound   []QPSide
	y, w        []float64
	tmp         []float64
	rs, dz, du  []float64 // refinement residuals and corrections
	skip        []bool    // constraints set aside this solve as met to rounding
	ignored     int
}

// NewQPSolver returns a solver for QPs with n variables and m general rows.
func NewQPSolver(n, m int, s QPSettings) *QPSolver {
	if n <= 0 || m < 0 {
		panic("mpc: qp: bad size")
	}
	return &QPSolver{
		n: n, m: m, settings: s,
		j:         make([]float64, n*n),
		j0:        make([]float64, n*n),
		r:         make([]float64, n*n),
		active:    make([]int32, n+1),
		u:         make([]float64, n+1),
		d:         make([]float64, n),
		zs:        make([]float64, n),
		rdir:      make([]float64, n+1),
		rowNorm:   make([]float64, m),
		rowAbs:    make([]float64, m),
		rowNNZ:    make([]int32, m),
		rowIdx:    make([]int32, m*n),
		rowSide:   make([]QPSide, m),
		boundSide: make([]QPSide, n),
		warmRow:   make([]QPSide, m),
		warmBound: make([]QPSide, n),
		y:         make([]float64, m),
		w:         make([]float64, n),
		tmp:       make([]float64, n),
		rs:        make([]float64, n),
		dz:        make([]float64, n),
		du:        make([]float64, n+1),
		skip:      make([]bool, m+n),
	}
}

// WarmSet returns the active set that the next warm solve starts from: after
// a solve it holds that solve's active set. The caller may edit it in place,
// for example to shift it by one step of a receding horizon.
func (s *QPSolver) WarmSet() (rows, bounds []QPSide) { return s.warmRow, s.warmBound }

func (s *QPSolver) maxIterations() int {
	if s.settings.MaxIterations > 0 {
		return s.settings.MaxIterations
	}
	return 5*(s.n+s.m) + 50
}

func (s *QPSolver) feasTol() float64 {
	if s.settings.FeasibilityTol > 0 {
		return s.settings.FeasibilityTol
	}
	return 1e-11
}

// Solve writes into z the minimiser of qp. With warm set, it starts from the
// active set in WarmSet. Solve factorises qp.H; SolveFactorized reuses the
// last factorisation.
func (s *QPSolver) Solve(z []float64, qp *QP, warm bool) (QPResult, error) {
	if err := s.Factorize(qp.H); err != nil {
		return QPResult{}, err
	}
	return s.SolveFactorized(z, qp, warm)
}

// Factorize computes the Cholesky factor of h and J = L⁻ᵀ. It lets a caller
// factorise in a prepare phase and solve later with SolveFactorized, whose
// QP must then have the same H.
func (s *QPSolver) Factorize(h *mat.SymDense) error {
	n := s.n
	if h == nil || h.SymmetricDim() != n {
		panic("mpc: qp: H has the wrong size")
	}
	s.factorized = false
	s.warmReady = false
	raw := h.RawSymmetric()
	// j0 ← lower triangle of H (row-major), zeros above.
	jm := s.j0
	clear(jm)
	for i := range n {
		for k := 0; k <= i; k++ {
			v := raw.Data[k*raw.Stride+i]
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return ErrQPNotFinite
			}
			jm[i*n+k] = v
		}
	}
	// H = L Lᵀ, then L⁻¹ in place, with the unblocked LAPACK routines dpotf2
	// and dtrti2 of gonum's native implementation: they allocate nothing and,
	// unlike the blocked ones (whose dgemm goes parallel for n > 256), never
	// start a goroutine, as the pure core requires. Row k of L⁻¹ is column k
	// of J = L⁻ᵀ, which is how j0 is laid out.
	var impl gonumlapack.Implementation
	if !impl.Dpotf2(blas.Lower, n, jm, n) {
		return ErrQPNotConvex
	}
	impl.Dtrti2(blas.Lower, blas.NonUnit, n, jm, n) // the diagonal is positive
	s.factorized = true
	return nil
}

// SolveFactorized is Solve without the factorisation: qp.H must be the
// matrix last passed to Factorize (or Solve).
func (s *QPSolver) SolveFactorized(z []float64, qp *QP, warm bool) (QPResult, error) {
	if !s.factorized {
		panic("mpc: qp: SolveFactorized before a successful Factorize")
	}
	s.checkShape(z, qp)
	ready := warm && s.warmReady
	s.warmReady = false
	if err := s.checkData(qp, ready); err != nil {
		return QPResult{}, err
	}
	clear(s.skip)
	s.ignored = 0
	if ready {
		// PrepareWarm built J and R for the warm set; drop sides that this
		// QP no longer has and mark the rest for this QP.
		for k := s.q - 1; k >= 0; k-- {
			if _, ok := s.constraintBound(qp, s.active[k]); !ok {
				s.dropActive(k)
			}
		}
		clear(s.rowSide)
		clear(s.boundSide)
		for k := range s.q {
			s.markActive(qp, s.active[k])
		}
	} else {
		// Start from J = L⁻ᵀ with no constraint active; a warm start then
		// rebuilds its active set.
		s.resetActive()
		if warm {
			s.addWarmSet(qp)
		}
	}
	iterations := 0
	if warm {
		it, err := s.dropNegative(z, qp)
		iterations += it
		if err != nil {
			return s.finish(z, qp, iterations), err
		}
	} else {
		s.unconstrained(z, qp)
	}
	it, err := s.dualLoop(z, qp, iterations)
	iterations = it
	if err == nil {
		s.refine(z, qp)
	}
	res := s.finish(z, qp, iterations)
	return res, err
}

func (s *QPSolver) checkShape(z []float64, qp *QP) {
	n, m := s.n, s.m
	if (z != nil && len(z) != n) || len(qp.G) != n {
		panic("mpc: qp: z or G has the wrong length")
	}
	if m > 0 {
		if qp.C == nil {
			panic("mpc: qp: C is nil but the solver has rows")
		}
		if r, c := qp.C.Dims(); r != m || c != n {
			panic("mpc: qp: C has the wrong shape")
		}
		if len(qp.Lo) != m || len(qp.Hi) != m {
			panic("mpc: qp: Lo or Hi has the wrong length")
		}
	}
	if (qp.LB != nil && len(qp.LB) != n) || (qp.UB != nil && len(qp.UB) != n) {
		panic("mpc: qp: LB or UB has the wrong length")
	}
}

// checkData validates g and the bounds and, unless rowsKnown (PrepareWarm
// analysed the same C), analyses the rows of C.
func (s *QPSolver) checkData(qp *QP, rowsKnown bool) error {
	for _, v := range qp.G {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return ErrQPNotFinite
		}
	}
	check := func(lo, hi []float64) error {
		for i := range lo {
			if math.IsNaN(lo[i]) || math.IsNaN(hi[i]) || math.IsInf(lo[i], 1) || math.IsInf(hi[i], -1) {
				return ErrQPNotFinite
			}
			if lo[i] > hi[i] {
				return ErrQPInfeasible
			}
		}
		return nil
	}
	if s.m > 0 {
		if err := check(qp.Lo, qp.Hi); err != nil {
			return err
		}
		if !rowsKnown {
			if err := s.analyseRows(qp); err != nil {
				return err
			}
		}
		for i, norm := range s.rowNorm {
			if norm == 0 && (qp.Lo[i] > 0 || qp.Hi[i] < 0) {
				return ErrQPInfeasible // 0 = Cᵢz outside [Lo, Hi]
			}
		}
	}
	if qp.LB != nil && qp.UB != nil {
		return check(qp.LB, qp.UB)
	}
	for _, b := range [][]float64{qp.LB, qp.UB} {
		for _, v := range b {
			if math.IsNaN(v) {
				return ErrQPNotFinite
			}
		}
	}
	return nil
}

// analyseRows computes each row's norms and non-zero pattern.
func (s *QPSolver) analyseRows(qp *QP) error {
	if s.m == 0 {
		return nil
	}
	raw := qp.C.RawMatrix()
	for i := range s.m {
		row := raw.Data[i*raw.Stride : i*raw.Stride+s.n]
		idx := s.rowIdx[i*s.n : (i+1)*s.n]
		sum, abs, nnz := 0.0, 0.0, 0
		for j, v := range row {
			sum += v * v
			abs += math.Abs(v)
			if v != 0 {
				idx[nnz] = int32(j)
				nnz++
			}
		}
		// Rows of difference operators have a few non-zeros; use the
		// index list when it saves at least half the work.
		s.rowNNZ[i] = int32(nnz)
		if 2*nnz > s.n {
			s.rowNNZ[i] = -1
		}
		if math.IsNaN(sum) || math.IsInf(sum, 0) {
			return ErrQPNotFinite
		}
		s.rowNorm[i] = math.Sqrt(sum)
		s.rowAbs[i] = abs
	}
	return nil
}

// unconstrained sets z = −H⁻¹g = −J Jᵀ g with no constraint active.
func (s *QPSolver) unconstrained(z []float64, qp *QP) {
	n := s.n
	clear(z)
	for k := range n {
		col := s.j[k*n : (k+1)*n]
		t := qpDot(col, qp.G)
		qpAxpy(z, -t, col)
	}
}

// constraint returns the bound b of constraint code in the form nᵀz ≥ b and
// whether it exists (an infinite side does not).
func (s *QPSolver) constraintBound(qp *QP, code int32) (float64, bool) {
	i, upper := int(code>>1), code&1 == 1
	var lo, hi float64
	if i < s.m {
		lo, hi = qp.Lo[i], qp.Hi[i]
	} else {
		lo, hi = math.Inf(-1), math.Inf(1)
		if qp.LB != nil {
			lo = qp.LB[i-s.m]
		}
		if qp.UB != nil {
			hi = qp.UB[i-s.m]
		}
	}
	if upper {
		return -hi, !math.IsInf(hi, 1)
	}
	return lo, !math.IsInf(lo, -1)
}

// isEquality reports whether constraint index i (row or bound) has equal
// sides, so that it is never removed and its multiplier has no sign.
func (s *QPSolver) isEquality(qp *QP, i int) bool {
	if i < s.m {
		return qp.Lo[i] == qp.Hi[i]
	}
	return qp.LB != nil && qp.UB != nil && qp.LB[i-s.m] == qp.UB[i-s.m]
}

// normalDot returns nᵀv for the (oriented) normal of code.
func (s *QPSolver) normalDot(qp *QP, code int32, v []float64) float64 {
	i, upper := int(code>>1), code&1 == 1
	var t float64
	if i < s.m {
		t = s.rowDot(qp, i, v)
	} else {
		t = v[i-s.m]
	}
	if upper {
		return -t
	}
	return t
}

// rowDot returns Cᵢ·v, using the row's non-zero list when it has one.
func (s *QPSolver) rowDot(qp *QP, i int, v []float64) float64 {
	raw := qp.C.RawMatrix()
	row := raw.Data[i*raw.Stride : i*raw.Stride+s.n]
	nnz := s.rowNNZ[i]
	if nnz < 0 {
		return qpDot(row, v)
	}
	sum := 0.0
	for _, j := range s.rowIdx[i*s.n : i*s.n+int(nnz)] {
		sum += row[j] * v[j]
	}
	return sum
}

// directions computes d = Jᵀn for constraint code.
func (s *QPSolver) directions(qp *QP, code int32) {
	n := s.n
	i, upper := int(code>>1), code&1 == 1
	if i < s.m {
		raw := qp.C.RawMatrix()
		row := raw.Data[i*raw.Stride : i*raw.Stride+n]
		if nnz := s.rowNNZ[i]; nnz >= 0 {
			idx := s.rowIdx[i*n : i*n+int(nnz)]
			for k := range n {
				col := s.j[k*n : (k+1)*n]
				sum := 0.0
				for _, j := range idx {
					sum += row[j] * col[j]
				}
				s.d[k] = sum
			}
		} else {
			for k := range n {
				s.d[k] = qpDot(s.j[k*n:(k+1)*n], row)
			}
		}
	} else {
		v := i - s.m
		for k := range n {
			s.d[k] = s.j[k*n+v]
		}
	}
	if upper {
		for k := range n {
			s.d[k] = -s.d[k]
		}
	}
}

// dependent reports whether the normal with d = Jᵀn lies (numerically) in
// the span of the active normals: the part of d beyond the active set is
// below 1e-11 of the whole (common practice; near machine precision times
// a safety factor for the rotations).
func (s *QPSolver) dependent() (d2sq float64, dep bool) {
	all := 0.0
	for k := range s.n {
		all += s.d[k] * s.d[k]
		if k >= s.q {
			d2sq += s.d[k] * s.d[k]
		}
	}
	return d2sq, d2sq <= 1e-22*all
}

// addActive appends code to the active set with multiplier u, updating J
// and R with Givens rotations; s.d must hold Jᵀn for it.
func (s *QPSolver) addActive(code int32, u float64) {
	n, q := s.n, s.q
	d := s.d
	for k := n - 1; k > q; k-- {
		if d[k] == 0 {
			continue
		}
		c, sn, h := qpGivens(d[k-1], d[k])
		d[k-1], d[k] = h, 0
		rotateColumns(s.j[(k-1)*n:k*n], s.j[k*n:(k+1)*n], c, sn)
	}
	copy(s.r[q*n:q*n+q+1], d[:q+1])
	s.active[q] = code
	s.u[q] = u
	s.q++
}

// dropActive removes the active constraint at position l and restores R to
// triangular form.
func (s *QPSolver) dropActive(l int) {
	n, q := s.n, s.q
	for c := l; c < q-1; c++ {
		copy(s.r[c*n:c*n+c+2], s.r[(c+1)*n:(c+1)*n+c+2])
		s.active[c] = s.active[c+1]
		s.u[c] = s.u[c+1]
	}
	for c := l; c < q-1; c++ {
		a, b := s.r[c*n+c], s.r[c*n+c+1]
		if a == 0 && b == 0 {
			continue
		}
		cs, sn, h := qpGivens(a, b)
		s.r[c*n+c], s.r[c*n+c+1] = h, 0
		for cc := c + 1; cc < q-1; cc++ {
			x, y := s.r[cc*n+c], s.r[cc*n+c+1]
			s.r[cc*n+c], s.r[cc*n+c+1] = cs*x+sn*y, -sn*x+cs*y
		}
		rotateColumns(s.j[c*n:(c+1)*n], s.j[(c+1)*n:(c+2)*n], cs, sn)
	}
	s.q--
}

// qpGivens returns the rotation (c, s) with c·a + s·b = h = √(a²+b²) and
// −s·a + c·b = 0. math.Hypot is exact but slow; the plain formula is used
// unless a² + b² could have overflowed or lost precision to underflow.
func qpGivens(a, b float64) (c, s, h float64) {
	h = math.Sqrt(a*a + b*b)
	if !(h > 1e-150) || math.IsInf(h, 1) {
		h = math.Hypot(a, b)
	}
	return a / h, b / h, h
}

// rotateColumns applies [a b] ← [c·a + s·b, −s·a + c·b].
func rotateColumns(a, b []float64, c, sn float64) {
	b = b[:len(a)]
	for i := range a {
		x, y := a[i], b[i]
		a[i] = c*x + sn*y
		b[i] = -sn*x + c*y
	}
}

// solveR solves R x = b (upper triangular, q×q) in place.
func (s *QPSolver) solveR(x []float64) {
	n := s.n
	for i := s.q - 1; i >= 0; i-- {
		sum := x[i]
		for k := i + 1; k < s.q; k++ {
			sum -= s.r[k*n+i] * x[k]
		}
		x[i] = sum / s.r[i*n+i]
	}
}

// solveRT solves Rᵀ x = b in place.
func (s *QPSolver) solveRT(x []float64) {
	n := s.n
	for i := range s.q {
		sum := x[i]
		for k := range i {
			sum -= s.r[i*n+k] * x[k]
		}
		x[i] = sum / s.r[i*n+i]
	}
}

// PrepareWarm factorises the warm-start active set (WarmSet) against the
// matrix of the last Factorize, so that the next SolveFactorized with warm
// set starts from it at once: the work that does not depend on g or on the
// values of the bounds moves into a planner's prepare phase. Only qp.C and
// which sides of Lo, Hi, LB and UB are finite are read; the QP given to
// SolveFactorized must have the same C.
func (s *QPSolver) PrepareWarm(qp *QP) {
	if !s.factorized {
		panic("mpc: qp: PrepareWarm before a successful Factorize")
	}
	s.checkShape(nil, qp)
	if err := s.analyseRows(qp); err != nil {
		s.warmReady = false
		return // SolveFactorized will report it
	}
	s.resetActive()
	s.addWarmSet(qp)
	s.warmReady = true
}

// resetActive restores J = L⁻ᵀ with no active constraint.
func (s *QPSolver) resetActive() {
	copy(s.j, s.j0)
	s.q = 0
	clear(s.rowSide)
	clear(s.boundSide)
}

// addWarmSet adds the constraints of WarmSet that this QP has and that are
// independent of those added before them.
func (s *QPSolver) addWarmSet(qp *QP) {
	add := func(i int, side QPSide) {
		var code int32
		switch side {
		case QPAtLower, QPFixed:
			code = int32(2 * i)
		case QPAtUpper:
			code = int32(2*i + 1)
		default:
			return
		}
		if _, ok := s.constraintBound(qp, code); !ok {
			code ^= 1 // a QPFixed side may only exist on the other side
			if _, ok := s.constraintBound(qp, code); !ok || side != QPFixed {
				return
			}
		}
		if s.q == s.n {
			return
		}
		s.directions(qp, code)
		if _, dep := s.dependent(); dep {
			return
		}
		s.addActive(code, 0)
		s.markActive(qp, code)
	}
	for i, side := range s.warmRow {
		add(i, side)
	}
	for j, side := range s.warmBound {
		add(s.m+j, side)
	}
}

// dropNegative computes the minimiser with the active constraints held as
// equalities and removes constraints with negative multipliers until the
// point is dual feasible, the starting point the dual method needs.
func (s *QPSolver) dropNegative(z []float64, qp *QP) (int, error) {
	iterations := 0
	for {
		s.eqpSolve(z, qp)
		worst, at := 0.0, -1
		for k := range s.q {
			if s.isEquality(qp, int(s.active[k]>>1)) {
				continue
			}
			if s.u[k] < worst {
				worst, at = s.u[k], k
			}
		}
		if at < 0 {
			return iterations, nil
		}
		iterations++
		if iterations > s.maxIterations() {
			return iterations, ErrQPIterationLimit
		}
		s.unmark(s.active[at])
		s.dropActive(at)
	}
}

// eqpSolve sets z and the multipliers to the minimiser subject to the
// active constraints holding with equality:
//
//	z = J₁R⁻ᵀb − J₂J₂ᵀg,  u = R⁻¹(R⁻ᵀb + J₁ᵀg).
func (s *QPSolver) eqpSolve(z []float64, qp *QP) {
	for k := range s.q {
		s.tmp[k], _ = s.constraintBound(qp, s.active[k])
	}
	s.eqpMap(z, s.u, qp.G, s.tmp)
}

// eqpMap writes the solution of the equality-constrained QP with gradient
// gv and active right-hand sides bv (length q, overwritten):
//
//	z = J₁R⁻ᵀbv − J₂J₂ᵀgv,  u = R⁻¹(R⁻ᵀbv + J₁ᵀgv).
func (s *QPSolver) eqpMap(z, u, gv, bv []float64) {
	n, q := s.n, s.q
	y := bv[:q]
	s.solveRT(y)
	clear(z)
	for k := range n {
		col := s.j[k*n : (k+1)*n]
		if k < q {
			qpAxpy(z, y[k], col)
			u[k] = y[k] + qpDot(col, gv)
		} else {
			qpAxpy(z, -qpDot(col, gv), col)
		}
	}
	s.solveR(u[:q])
}

// refine makes one step of iterative refinement on the final active set
// (common practice for factorisations updated many times, cf. Golub & Van
// Loan, Matrix Computations, §3.5.3): with the residuals
// rₛ = Hz + g − Σ uₖnₖ and rₚ = b − Nᵀz, the correction solves the same
// equality-constrained QP with gradient rₛ and right-hand side rₚ.
func (s *QPSolver) refine(z []float64, qp *QP) {
	n, q := s.n, s.q
	symMulVec(s.rs, qp.H, z)
	for j := range n {
		s.rs[j] += qp.G[j]
	}
	for k := range q {
		code := s.active[k]
		b, _ := s.constraintBound(qp, code)
		s.du[k] = b - s.normalDot(qp, code, z)
		i, sign := int(code>>1), 1.0
		if code&1 == 1 {
			sign = -1
		}
		if i < s.m {
			raw := qp.C.RawMatrix()
			qpAxpy(s.rs, -sign*s.u[k], raw.Data[i*raw.Stride:i*raw.Stride+n])
		} else {
			s.rs[i-s.m] -= sign * s.u[k]
		}
	}
	s.eqpMap(s.dz, s.tmp, s.rs, s.du)
	for j := range n {
		z[j] += s.dz[j]
	}
	for k := range q {
		s.u[k] += s.tmp[k]
		if s.u[k] < 0 && !s.isEquality(qp, int(s.active[k]>>1)) {
			s.u[k] = 0
		}
	}
}

// symMulVec sets dst = H v from the upper triangle of H.
func symMulVec(dst []float64, h *mat.SymDense, v []float64) {
	raw := h.RawSymmetric()
	n := len(v)
	for i := range n {
		row := raw.Data[i*raw.Stride : i*raw.Stride+n]
		sum := 0.0
		for k := range i {
			sum += raw.Data[k*raw.Stride+i] * v[k]
		}
		for k := i; k < n; k++ {
			sum += row[k] * v[k]
		}
		dst[i] = sum
	}
}

func (s *QPSolver) markActive(qp *QP, code int32) {
	i := int(code >> 1)
	side := QPAtLower
	if code&1 == 1 {
		side = QPAtUpper
	}
	if s.isEquality(qp, i) {
		side = QPFixed
	}
	if i < s.m {
		s.rowSide[i] = side
	} else {
		s.boundSide[i-s.m] = side
	}
}

func (s *QPSolver) unmark(code int32) {
	i := int(code >> 1)
	if i < s.m {
		s.rowSide[i] = QPInactive
	} else {
		s.boundSide[i-s.m] = QPInactive
	}
}

// mostViolated returns the inactive constraint with the largest violation
// scaled by its normal's length, oriented so that its slack is negative, or
// −1 if none is violated beyond the tolerance.
func (s *QPSolver) mostViolated(z []float64, qp *QP) (int32, error) {
	tol := s.feasTol()
	best, bestCode := 0.0, int32(-1)
	consider := func(i int, t, scale, lo, hi, norm float64) {
		if t < lo && lo-t > tol*(1+math.Abs(lo)+scale) {
			if v := (lo - t) / norm; v > best {
				best, bestCode = v, int32(2*i)
			}
		} else if t > hi && t-hi > tol*(1+math.Abs(hi)+scale) {
			if v := (t - hi) / norm; v > best {
				best, bestCode = v, int32(2*i+1)
			}
		}
	}
	if s.m > 0 {
		zmax := 0.0
		for _, v := range z {
			zmax = math.Max(zmax, math.Abs(v))
		}
		for i := range s.m {
			lo, hi := qp.Lo[i], qp.Hi[i]
			if s.rowSide[i] != QPInactive || s.skip[i] || s.rowNorm[i] == 0 || (math.IsInf(lo, -1) && math.IsInf(hi, 1)) {
				continue
			}
			t := s.rowDot(qp, i, z)
			if math.IsNaN(t) {
				return -1, ErrQPNotFinite
			}
			consider(i, t, s.rowAbs[i]*zmax, lo, hi, s.rowNorm[i])
		}
	}
	if qp.LB != nil || qp.UB != nil {
		for j := range s.n {
			if s.boundSide[j] != QPInactive || s.skip[s.m+j] {
				continue
			}
			lo, hi := math.Inf(-1), math.Inf(1)
			if qp.LB != nil {
				lo = qp.LB[j]
			}
			if qp.UB != nil {
				hi = qp.UB[j]
			}
			if math.IsNaN(z[j]) {
				return -1, ErrQPNotFinite
			}
			consider(s.m+j, z[j], math.Abs(z[j]), lo, hi, 1)
		}
	}
	return bestCode, nil
}

// violationScale is Σⱼ|nⱼ|·max|z| for a row and |zⱼ| for a bound: the size
// of the terms whose rounding makes up a constraint's computed value.
func (s *QPSolver) violationScale(code int32, z []float64) float64 {
	i := int(code >> 1)
	if i >= s.m {
		return math.Abs(z[i-s.m])
	}
	zmax := 0.0
	for _, v := range z {
		zmax = math.Max(zmax, math.Abs(v))
	}
	return s.rowAbs[i] * zmax
}

// dualLoop is the Goldfarb–Idnani iteration from the current active set.
func (s *QPSolver) dualLoop(z []float64, qp *QP, iterations int) (int, error) {
	n := s.n
	maxIt := s.maxIterations()
	for {
		p, err := s.mostViolated(z, qp)
		if err != nil {
			return iterations, err
		}
		if p < 0 {
			return iterations, nil
		}
		bp, _ := s.constraintBound(qp, p)
		uPlus := 0.0
		for {
			iterations++
			if iterations > maxIt {
				return iterations, ErrQPIterationLimit
			}
			slack := s.normalDot(qp, p, z) - bp
			s.directions(qp, p)
			d2sq, dep := s.dependent()
			// Primal direction zs = J₂d₂, dual direction r = R⁻¹d₁.
			clear(s.zs)
			if !dep {
				for k := s.q; k < n; k++ {
					qpAxpy(s.zs, s.d[k], s.j[k*n:(k+1)*n])
				}
			}
			copy(s.rdir[:s.q], s.d[:s.q])
			s.solveR(s.rdir[:s.q])
			// Partial step: the largest step keeping the multipliers of
			// inequalities non-negative.
			t1, drop := math.Inf(1), -1
			for k := range s.q {
				if s.rdir[k] > 0 && !s.isEquality(qp, int(s.active[k]>>1)) {
					if t := s.u[k] / s.rdir[k]; t < t1 {
						t1, drop = t, k
					}
				}
			}
			// Full step: the step that makes constraint p active.
			t2 := math.Inf(1)
			if !dep {
				t2 = math.Max(-slack/d2sq, 0)
			}
			if math.IsInf(t1, 1) && math.IsInf(t2, 1) {
				// No primal or dual step can satisfy p: infeasible, unless p
				// is violated by rounding only (see QPResult.Ignored). Then
				// set p aside and restore the optimum of the active set,
				// which the dual steps taken for p may have disturbed.
				if -slack > 1e-6*(1+math.Abs(bp)+s.violationScale(p, z)) {
					return iterations, ErrQPInfeasible
				}
				s.skip[p>>1] = true
				s.ignored++
				it, err := s.dropNegative(z, qp)
				iterations += it
				if err != nil {
					return iterations, err
				}
				break
			}
			if math.IsInf(t2, 1) {
				// Dual step only: p depends on the active normals.
				for k := range s.q {
					s.u[k] -= t1 * s.rdir[k]
				}
				uPlus += t1
				s.unmark(s.active[drop])
				s.dropActive(drop)
				continue
			}
			t := math.Min(t1, t2)
			qpAxpy(z, t, s.zs)
			for k := range s.q {
				s.u[k] -= t * s.rdir[k]
			}
			uPlus += t
			if t2 <= t1 {
				s.addActive(p, uPlus)
				s.markActive(qp, p)
				break
			}
			s.unmark(s.active[drop])
			s.dropActive(drop)
		}
	}
}

// finish writes the multipliers, sides and objective, and keeps the active
// set for the next warm start.
func (s *QPSolver) finish(z []float64, qp *QP, iterations int) QPResult {
	clear(s.y)
	clear(s.w)
	for k := range s.q {
		code := s.active[k]
		i := int(code >> 1)
		mult := -s.u[k] // lower side: nᵀ = cᵀ, y = −u
		if code&1 == 1 {
			mult = s.u[k]
		}
		if i < s.m {
			s.y[i] = mult
		} else {
			s.w[i-s.m] = mult
		}
	}
	copy(s.warmRow, s.rowSide)
	copy(s.warmBound, s.boundSide)
	symMulVec(s.rs, qp.H, z)
	obj := 0.0
	for i := range s.n {
		obj += z[i] * (0.5*s.rs[i] + qp.G[i])
	}
	return QPResult{
		Iterations: iterations,
		Objective:  obj,
		RowMult:    s.y,
		BoundMult:  s.w,
		RowSide:    s.rowSide,
		BoundSide:  s.boundSide,
		Ignored:    s.ignored,
	}
}

func qpDot(a, b []float64) float64 {
	b = b[:len(a)]
	sum := 0.0
	for i, v := range a {
		sum += v * b[i]
	}
	return sum
}

// qpAxpy sets y += alpha·x.
func qpAxpy(y []float64, alpha float64, x []float64) {
	x = x[:len(y)]
	for i := range y {
		y[i] += alpha * x[i]
	}
}
