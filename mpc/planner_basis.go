package mpc

import "math"

// correctionBasis describes the correction δq(τ) over the horizon
// τ ∈ [0, T], T = N·h_p, as a function of the knots c and of d0, the
// correction already applied at τ = 0 (which the planner cannot change):
//
//	δ(τ) = w_d0(τ)·d0 + Σ_j w_j(τ)·c_j,
//
// piecewise linear through (0, d0), (τ_0, c_0), …, (τ_{K−1}, c_{K−1}) with
// knots evenly spaced, τ_j = (j+1)·T/K, and constant beyond T. With K = N
// the knots are the steps themselves (one free correction per step).
// Being piecewise linear, the correction at any step is a convex
// combination of d0 and knots, so a box |c_j| ≤ δ_max (with |d0| ≤ δ_max)
// bounds the correction everywhere.
type correctionBasis struct {
	knots   int
	spacing float64 // T/K, s
	steps   int
	stepS   float64 // h_p

	// stepW[k*(knots+1)+0] is w_d0 at τ = k·h_p, k = 0…N, and
	// stepW[k*(knots+1)+1+j] is w_j there.
	stepW []float64
}

func newCorrectionBasis(steps, knots int, stepS float64) *correctionBasis {
	b := &correctionBasis{knots: knots, steps: steps, stepS: stepS,
		spacing: float64(steps) * stepS / float64(knots)}
	b.stepW = make([]float64, (steps+1)*(knots+1))
	for k := 0; k <= steps; k++ {
		lo, hi, wlo, whi := b.weightsAt(float64(k) * stepS)
		row := b.stepW[k*(knots+1) : (k+1)*(knots+1)]
		row[lo+1] += wlo
		row[hi+1] += whi
	}
	return b
}

// weightsAt returns the two basis functions that are non-zero at τ and
// their weights; index −1 stands for d0.
func (b *correctionBasis) weightsAt(tau float64) (lo, hi int, wlo, whi float64) {
	if !(tau > 0) {
		return -1, -1, 1, 0
	}
	seg := tau / b.spacing
	j := math.Floor(seg)
	// A step time that lands on a knot up to rounding belongs to that knot.
	if r := math.Round(seg); math.Abs(seg-r) < 1e-9 {
		seg, j = r, r
	}
	if int(j) >= b.knots {
		return b.knots - 1, b.knots - 1, 1, 0
	}
	frac := seg - j
	return int(j) - 1, int(j), 1 - frac, frac
}

// weight returns w_d0 (j = −1) or w_j at step k.
func (b *correctionBasis) weight(k, j int) float64 {
	return b.stepW[k*(b.knots+1)+j+1]
}

// valueAt returns δ_i(τ) for joint i of nq, given d0 and knots c (knot j,
// joint i at c[j*nq+i]).
func (b *correctionBasis) valueAt(tau float64, i, nq int, d0, c []float64) float64 {
	lo, hi, wlo, whi := b.weightsAt(tau)
	at := func(j int) float64 {
		if j < 0 {
			return d0[i]
		}
		return c[j*nq+i]
	}
	return wlo*at(lo) + whi*at(hi)
}

// knotTimeS returns τ_j.
func (b *correctionBasis) knotTimeS(j int) float64 { return float64(j+1) * b.spacing }
