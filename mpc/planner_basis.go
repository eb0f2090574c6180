package mpc

import "math"

// correctionBasis describes the correction δq(τ) over the horizon
// τ ∈ [0, T], T = N·h_p, as a clamped uniform B-spline of degree p whose
// first control point is d0, the correction already applied at τ = 0
// (which the planner cannot change), and whose other K control points are
// the knots c_j:
//
//	δ(τ) = B_0(τ)·d0 + Σ_j B_{j+1}(τ)·c_j,  constant beyond T.
//
// The knot vector is p+1 zeros, K−p evenly spaced interior knots, and p+1
// copies of T (Piegl & Tiller, The NURBS Book, 2nd ed., §2.2–2.3). Being
// clamped, δ(0) = d0 and δ(T) = c_{K−1}. With p = 1 the curve is the
// piecewise-linear interpolation through (0, d0) and knots at
// τ_j = (j+1)·T/K (K = N gives one free correction per step); with p = 2
// it is C¹, so its acceleration is spread over the spans instead of
// concentrated at the knots, where a step-level acceleration bound would
// otherwise cap each knot's change of slope at a_max·h_p. The basis
// functions are non-negative and sum to one, so δ is a convex combination
// of d0 and the knots: a box |c_j| ≤ δ_max (with |d0| ≤ δ_max) bounds the
// correction everywhere.
type correctionBasis struct {
	knots  int // K
	degree int // p
	steps  int
	stepS  float64 // h_p
	u      []float64

	// stepW[k*(knots+1)+0] is B_0 at τ = k·h_p, k = 0…N, and
	// stepW[k*(knots+1)+1+j] is B_{j+1} there.
	stepW []float64
}

func newCorrectionBasis(steps, knots, degree int, stepS float64) *correctionBasis {
	b := &correctionBasis{knots: knots, degree: degree, steps: steps, stepS: stepS}
	total := float64(steps) * stepS
	spans := knots - degree + 1
	b.u = make([]float64, knots+degree+2)
	for i := range b.u {
		switch {
		case i <= degree:
			b.u[i] = 0
		case i >= knots+1:
			b.u[i] = total
		default:
			b.u[i] = total * float64(i-degree) / float64(spans)
		}
	}
	b.stepW = make([]float64, (steps+1)*(knots+1))
	for k := 0; k <= steps; k++ {
		idx, w, n := b.weightsAt(float64(k) * stepS)
		row := b.stepW[k*(knots+1) : (k+1)*(knots+1)]
		for t := range n {
			row[idx[t]+1] += w[t]
		}
	}
	return b
}

// weightsAt returns the basis functions that are non-zero at τ (at most
// degree+1 ≤ 4) and their values; index −1 stands for d0, j ≥ 0 for knot j.
func (b *correctionBasis) weightsAt(tau float64) (idx [4]int, w [4]float64, n int) {
	p, last := b.degree, b.knots
	total := b.u[len(b.u)-1]
	if !(tau > 0) {
		idx[0], w[0] = -1, 1
		return idx, w, 1
	}
	// A step time that lands on T up to rounding is at T.
	if tau >= total*(1-1e-12) {
		idx[0], w[0] = last-1, 1
		return idx, w, 1
	}
	// The span s with u_s ≤ τ < u_{s+1}, p ≤ s ≤ K; interior knots are
	// evenly spaced, and a τ within rounding of a knot belongs to it.
	spans := b.knots - p + 1
	seg := tau / total * float64(spans)
	if r := math.Round(seg); math.Abs(seg-r) < 1e-9 {
		seg = r
	}
	s := p + min(int(math.Floor(seg)), spans-1)
	// Cox–de Boor, non-zero functions only (Piegl & Tiller, algorithm A2.2).
	var left, right [4]float64
	var nb [4]float64
	nb[0] = 1
	for j := 1; j <= p; j++ {
		left[j] = tau - b.u[s+1-j]
		right[j] = b.u[s+j] - tau
		saved := 0.0
		for r := range j {
			tmp := nb[r] / (right[r+1] + left[j-r])
			nb[r] = saved + right[r+1]*tmp
			saved = left[j-r] * tmp
		}
		nb[j] = saved
	}
	for t := 0; t <= p; t++ {
		idx[t] = s - p + t - 1 // control point s−p+t; control point 0 is d0
		w[t] = nb[t]
	}
	return idx, w, p + 1
}

// weight returns B_0 (j = −1) or B_{j+1} at step k.
func (b *correctionBasis) weight(k, j int) float64 {
	return b.stepW[k*(b.knots+1)+j+1]
}

// valueAt returns δ_i(τ) for joint i of nq, given d0 and knots c (knot j,
// joint i at c[j*nq+i]).
func (b *correctionBasis) valueAt(tau float64, i, nq int, d0, c []float64) float64 {
	idx, w, n := b.weightsAt(tau)
	var v float64
	for t := range n {
		if idx[t] < 0 {
			v += w[t] * d0[i]
		} else {
			v += w[t] * c[idx[t]*nq+i]
		}
	}
	return v
}

// knotTimeS returns the Greville abscissa of knot j (control point j+1),
// the mean of its p interior knot-vector entries: the time a knot "sits
// at", used to carry the correction forward when the horizon shifts. For
// p = 1 it is the knot's interpolation time.
func (b *correctionBasis) knotTimeS(j int) float64 {
	var s float64
	for t := 1; t <= b.degree; t++ {
		s += b.u[j+1+t]
	}
	return s / float64(b.degree)
}
