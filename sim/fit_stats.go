package sim

import (
	"errors"
	"math"
	"slices"

	"gonum.org/v1/gonum/mat"
)

// DefaultUndeterminedRatio is the default FitStatsSettings.UndeterminedRatio.
const DefaultUndeterminedRatio = 1e-4

// FitStatsSettings tune FitStatistics; the zero value means the defaults.
type FitStatsSettings struct {
	// UndeterminedRatio: a direction of parameter space whose singular
	// value of the column-scaled Jacobian is below this fraction of the
	// largest counts as undetermined by the data; 0 means
	// DefaultUndeterminedRatio (a condition number of 10⁴ of the
	// equilibrated Jacobian, common practice for calling columns nearly
	// dependent).
	UndeterminedRatio float64
	// MaxRelStdErr: a direction of parameter space (a singular vector of
	// the Jacobian with each column scaled by its parameter's typical size)
	// whose standard error exceeds this many typical sizes counts as
	// undetermined: the data cannot tell its value from zero. 0 means 0.5.
	MaxRelStdErr float64
}

// FitStats are the statistics of a least-squares fit at its solution.
type FitStats struct {
	// Sigma2 is the residual variance estimate ‖r‖²/(m − n).
	Sigma2 float64
	// StdErr is each parameter's standard error, the square root of the
	// diagonal of σ²(JᵀJ)⁻¹ (the Gauss–Newton covariance; Seber and Wild,
	// Nonlinear Regression, 1989, ch. 2). +Inf for a parameter in an
	// undetermined direction (the inverse is taken over the determined
	// directions only, so the other errors stay finite).
	StdErr []float64
	// Singular are the singular values of the Jacobian with every column
	// scaled to unit length, largest first; Condition is the largest over
	// the smallest.
	Singular  []float64
	Condition float64
	// Undetermined lists, for every undetermined direction, the
	// parameters that make up most of it (|component| ≥ 0.3, largest
	// first): first the nearly dependent directions, then those too weak
	// for the noise.
	Undetermined [][]int
}

// FitStatistics computes standard errors and undetermined directions from
// the Jacobian jac (m × n, m > n) and residuals r at the solution. typical
// holds each parameter's typical size (FitTypical; nil means 1 for all),
// against which MaxRelStdErr is measured.
func FitStatistics(jac *mat.Dense, r []float64, typical []float64, s FitStatsSettings) (*FitStats, error) {
	m, n := jac.Dims()
	if len(r) != m {
		panic("sim: FitStatistics: residuals and Jacobian disagree")
	}
	if m <= n {
		return nil, errors.New("fit statistics: no more residuals than parameters")
	}
	if s.UndeterminedRatio == 0 {
		s.UndeterminedRatio = DefaultUndeterminedRatio
	}
	if s.MaxRelStdErr == 0 {
		s.MaxRelStdErr = 0.5
	}
	st := &FitStats{Sigma2: sumSquares(r) / float64(m-n), StdErr: make([]float64, n)}
	scale := make([]float64, n)
	js := mat.NewDense(m, n, nil)
	for j := range n {
		col := mat.Col(nil, j, jac)
		norm := math.Sqrt(sumSquares(col))
		scale[j] = norm
		if norm > 0 {
			for i := range col {
				js.Set(i, j, col[i]/norm)
			}
		}
	}
	var svd mat.SVD
	if !svd.Factorize(js, mat.SVDThin) {
		return nil, errors.New("fit statistics: the SVD of the Jacobian failed")
	}
	st.Singular = svd.Values(nil)
	var v mat.Dense
	svd.VTo(&v)
	smax := st.Singular[0]
	st.Condition = smax / st.Singular[n-1]
	for j := range n {
		var varj float64
		undetermined := scale[j] == 0
		for k, sk := range st.Singular {
			vjk := v.At(j, k)
			if sk <= s.UndeterminedRatio*smax || sk == 0 {
				if math.Abs(vjk) >= 0.3 {
					undetermined = true
				}
				continue
			}
			varj += vjk * vjk / (sk * sk)
		}
		if undetermined {
			st.StdErr[j] = math.Inf(1)
			continue
		}
		st.StdErr[j] = math.Sqrt(st.Sigma2*varj) / scale[j]
	}
	for k, sk := range st.Singular {
		if sk > s.UndeterminedRatio*smax && sk != 0 {
			continue
		}
		var dir []int
		for j := range n {
			if math.Abs(v.At(j, k)) >= 0.3 {
				dir = append(dir, j)
			}
		}
		for a := 1; a < len(dir); a++ {
			for b := a; b > 0 && math.Abs(v.At(dir[b], k)) > math.Abs(v.At(dir[b-1], k)); b-- {
				dir[b], dir[b-1] = dir[b-1], dir[b]
			}
		}
		st.Undetermined = append(st.Undetermined, dir)
	}
	// Directions too weak for the noise: singular values of J·diag(typical)
	// with σ/s above MaxRelStdErr (the standard error of that combination,
	// in typical sizes).
	jt := mat.NewDense(m, n, nil)
	for j := range n {
		t := 1.0
		if typical != nil {
			t = typical[j]
		}
		for i := range m {
			jt.Set(i, j, jac.At(i, j)*t)
		}
	}
	var svdT mat.SVD
	if !svdT.Factorize(jt, mat.SVDThin) {
		return nil, errors.New("fit statistics: the SVD of the Jacobian failed")
	}
	var vt mat.Dense
	svdT.VTo(&vt)
	sigma := math.Sqrt(st.Sigma2)
	for k, sk := range svdT.Values(nil) {
		if !(sigma > s.MaxRelStdErr*sk) {
			continue
		}
		var dir []int
		for j := range n {
			if math.Abs(vt.At(j, k)) >= 0.3 {
				dir = append(dir, j)
			}
		}
		for a := 1; a < len(dir); a++ {
			for b := a; b > 0 && math.Abs(vt.At(dir[b], k)) > math.Abs(vt.At(dir[b-1], k)); b-- {
				dir[b], dir[b-1] = dir[b-1], dir[b]
			}
		}
		if !containsDir(st.Undetermined, dir) {
			st.Undetermined = append(st.Undetermined, dir)
		}
	}
	return st, nil
}

// containsDir reports whether dirs holds the same set of parameters as d.
func containsDir(dirs [][]int, d []int) bool {
	for _, e := range dirs {
		if len(e) != len(d) {
			continue
		}
		same := true
		for _, i := range d {
			if !slices.Contains(e, i) {
				same = false
			}
		}
		if same {
			return true
		}
	}
	return false
}
