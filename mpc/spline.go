package mpc

import (
	"errors"
	"math"
)

// cubicSpline is a C² piecewise-cubic interpolant of several channels (joints,
// marker coordinates) that share one set of knots, with clamped ends: the
// first derivative at the first and last knot is prescribed per channel.
//
// On segment i, with u = t − knotsS[i] ∈ [0, h_i], channel j is
//
//	p(u) = a + b·u + c·u² + d·u³
//
// and the four coefficients are stored together, segment-major, so one
// segment search serves every channel and evaluation walks memory in order.
//
// The coefficients come from the classic moment (second-derivative) equations
// of cubic spline interpolation (de Boor, A Practical Guide to Splines,
// chapter IV; any numerical-analysis text derives the same system). With
// M_i = p”(t_i), h_i = t_{i+1} − t_i, δ_i = (y_{i+1} − y_i)/h_i:
//
//	interior i:  h_{i−1}·M_{i−1} + 2(h_{i−1}+h_i)·M_i + h_i·M_{i+1} = 6(δ_i − δ_{i−1})
//	first knot:  2h_0·M_0 + h_0·M_1                                   = 6(δ_0 − s_start)
//	last knot:   h_{n−2}·M_{n−2} + 2h_{n−2}·M_{n−1}                   = 6(s_end − δ_{n−2})
//
// The matrix is strictly diagonally dominant for strictly increasing knots,
// so Gaussian elimination without pivoting (the Thomas algorithm) is stable,
// and it depends on the knots only: it is factored once and reused for every
// channel. Two knots suffice (one cubic segment, the Hermite cubic through
// both values with the two end slopes).
type cubicSpline struct {
	knotsS   []float64 // n ≥ 2 strictly increasing times, s
	channels int
	coef     []float64 // (n−1)·channels·4: a, b, c, d per segment per channel
	first    []float64 // value at the first knot per channel
	last     []float64 // value at the last knot per channel
}

var errSplineNotFinite = errors.New("spline coefficients are not finite (values or times too large or too close together)")

// fitClampedSpline fits the spline through values (row-major: len(knotsS)
// rows of channels values) with first derivative startSlope[j] at the first
// knot and endSlope[j] at the last. A nil slope slice means zero for every
// channel. It panics on shape misuse or knots that are not strictly
// increasing (callers validate their input first); it returns an error when
// the coefficients overflow.
func fitClampedSpline(knotsS, values []float64, channels int, startSlope, endSlope []float64) (*cubicSpline, error) {
	n := len(knotsS)
	switch {
	case n < 2:
		panic("mpc: spline needs at least 2 knots")
	case channels < 1:
		panic("mpc: spline needs at least 1 channel")
	case len(values) != n*channels:
		panic("mpc: spline values do not match knots × channels")
	case startSlope != nil && len(startSlope) != channels, endSlope != nil && len(endSlope) != channels:
		panic("mpc: spline end slopes do not match channels")
	}
	h := make([]float64, n-1)
	for i := range h {
		h[i] = knotsS[i+1] - knotsS[i]
		if !(h[i] > 0) {
			panic("mpc: spline knots are not strictly increasing")
		}
	}

	// Tridiagonal matrix: sub[i] = A[i][i−1], diag[i] = A[i][i], sup[i] = A[i][i+1].
	sub := make([]float64, n)
	diag := make([]float64, n)
	sup := make([]float64, n)
	diag[0], sup[0] = 2*h[0], h[0]
	for i := 1; i < n-1; i++ {
		sub[i], diag[i], sup[i] = h[i-1], 2*(h[i-1]+h[i]), h[i]
	}
	sub[n-1], diag[n-1] = h[n-2], 2*h[n-2]

	// Thomas algorithm, factor part: the modified super-diagonal supP and the
	// pivots piv depend only on the knots.
	supP := make([]float64, n)
	piv := make([]float64, n)
	piv[0] = diag[0]
	supP[0] = sup[0] / piv[0]
	for i := 1; i < n; i++ {
		piv[i] = diag[i] - sub[i]*supP[i-1]
		supP[i] = sup[i] / piv[i]
	}

	s := &cubicSpline{
		knotsS:   append([]float64(nil), knotsS...),
		channels: channels,
		coef:     make([]float64, (n-1)*channels*4),
		first:    make([]float64, channels),
		last:     make([]float64, channels),
	}
	rhs := make([]float64, n)
	m := make([]float64, n)
	y := func(i, j int) float64 { return values[i*channels+j] }
	for j := 0; j < channels; j++ {
		s0, s1 := 0.0, 0.0
		if startSlope != nil {
			s0 = startSlope[j]
		}
		if endSlope != nil {
			s1 = endSlope[j]
		}
		d0 := (y(1, j) - y(0, j)) / h[0]
		rhs[0] = 6 * (d0 - s0)
		for i := 1; i < n-1; i++ {
			dl := (y(i, j) - y(i-1, j)) / h[i-1]
			dr := (y(i+1, j) - y(i, j)) / h[i]
			rhs[i] = 6 * (dr - dl)
		}
		dLast := (y(n-1, j) - y(n-2, j)) / h[n-2]
		rhs[n-1] = 6 * (s1 - dLast)

		// Forward sweep, then back substitution.
		m[0] = rhs[0] / piv[0]
		for i := 1; i < n; i++ {
			m[i] = (rhs[i] - sub[i]*m[i-1]) / piv[i]
		}
		for i := n - 2; i >= 0; i-- {
			m[i] -= supP[i] * m[i+1]
		}

		for i := 0; i < n-1; i++ {
			k := (i*channels + j) * 4
			hi := h[i]
			a := y(i, j)
			b := (y(i+1, j)-y(i, j))/hi - hi*(2*m[i]+m[i+1])/6
			c := m[i] / 2
			d := (m[i+1] - m[i]) / (6 * hi)
			if !isFinite(b) || !isFinite(c) || !isFinite(d) {
				return nil, errSplineNotFinite
			}
			s.coef[k], s.coef[k+1], s.coef[k+2], s.coef[k+3] = a, b, c, d
		}
		s.first[j] = y(0, j)
		s.last[j] = y(n-1, j)
	}
	return s, nil
}

func isFinite(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }

func (s *cubicSpline) startS() float64 { return s.knotsS[0] }
func (s *cubicSpline) endS() float64   { return s.knotsS[len(s.knotsS)-1] }

// segment returns the index i of the segment [knotsS[i], knotsS[i+1]) that
// holds t, for t inside [start, end]; the end itself belongs to the last
// segment. Binary search: O(log n), no allocation.
func (s *cubicSpline) segment(t float64) int {
	lo, hi := 0, len(s.knotsS)-2
	for lo < hi {
		mid := int(uint(lo+hi+1) >> 1)
		if s.knotsS[mid] <= t {
			lo = mid
		} else {
			hi = mid - 1
		}
	}
	return lo
}

func (s *cubicSpline) checkEval(dst []float64, t float64) {
	if len(dst) != s.channels {
		panic("mpc: destination length does not match the spline's channels")
	}
	if math.IsNaN(t) {
		panic("mpc: spline evaluated at NaN time")
	}
}

// positionTo writes every channel's value at t into dst. Outside [start,
// end] it holds the first or last knot's value.
func (s *cubicSpline) positionTo(dst []float64, t float64) {
	s.checkEval(dst, t)
	switch {
	case t <= s.knotsS[0]:
		copy(dst, s.first)
		return
	case t >= s.knotsS[len(s.knotsS)-1]:
		copy(dst, s.last)
		return
	}
	i := s.segment(t)
	u := t - s.knotsS[i]
	c := s.coef[i*s.channels*4 : (i+1)*s.channels*4]
	for j := range dst {
		k := c[j*4 : j*4+4 : j*4+4]
		dst[j] = k[0] + u*(k[1]+u*(k[2]+u*k[3]))
	}
}

// velocityTo writes every channel's first derivative at t into dst; zero
// outside [start, end] (the held pose is at rest).
func (s *cubicSpline) velocityTo(dst []float64, t float64) {
	s.checkEval(dst, t)
	if t < s.knotsS[0] || t > s.knotsS[len(s.knotsS)-1] {
		clear(dst)
		return
	}
	i := s.segment(t)
	u := t - s.knotsS[i]
	c := s.coef[i*s.channels*4 : (i+1)*s.channels*4]
	for j := range dst {
		k := c[j*4 : j*4+4 : j*4+4]
		dst[j] = k[1] + u*(2*k[2]+u*3*k[3])
	}
}

// accelTo writes every channel's second derivative at t into dst; zero
// outside [start, end]. At the first and last knot it is the one-sided value
// from inside.
func (s *cubicSpline) accelTo(dst []float64, t float64) {
	s.checkEval(dst, t)
	if t < s.knotsS[0] || t > s.knotsS[len(s.knotsS)-1] {
		clear(dst)
		return
	}
	i := s.segment(t)
	u := t - s.knotsS[i]
	c := s.coef[i*s.channels*4 : (i+1)*s.channels*4]
	for j := range dst {
		k := c[j*4 : j*4+4 : j*4+4]
		dst[j] = 2*k[2] + 6*u*k[3]
	}
}

// segmentEval returns channel j's value, first and second derivative at
// offset u into segment i, with no clamping: u may be the segment's full
// length, which gives the left-hand limit at knot i+1.
func (s *cubicSpline) segmentEval(i, j int, u float64) (pos, vel, acc float64) {
	k := s.coef[(i*s.channels+j)*4 : (i*s.channels+j)*4+4]
	pos = k[0] + u*(k[1]+u*(k[2]+u*k[3]))
	vel = k[1] + u*(2*k[2]+u*3*k[3])
	acc = 2*k[2] + 6*u*k[3]
	return pos, vel, acc
}

// segmentCoef returns the a, b, c, d coefficients of channel j on segment i.
func (s *cubicSpline) segmentCoef(i, j int) (a, b, c, d float64) {
	k := s.coef[(i*s.channels+j)*4 : (i*s.channels+j)*4+4]
	return k[0], k[1], k[2], k[3]
}
