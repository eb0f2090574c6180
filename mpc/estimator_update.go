package mpc

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/floats"
)

// gateAndUpdate gates every observed marker on its innovation against the
// predicted state in e.wMean, e.wCov and applies the accepted ones in one
// batch (the Kalman 1960 update in its covariance form):
//
//	S = H·P·Hᵀ + R,  x ← x + P·Hᵀ·S⁻¹·ν,  P ← P − P·Hᵀ·S⁻¹·H·P.
//
// H selects the 3 coordinates of each marker's node in x_k, so P·Hᵀ is a
// set of rows of P and H·P·Hᵀ a set of its 3×3 blocks. With S = L·Lᵀ
// (Cholesky) and W = L⁻¹·H·P the update is x ← x + Wᵀ·(L⁻¹ν) and
// P ← P − Wᵀ·W, a symmetric rank-3m update computed on the upper triangle
// and mirrored: 3m·N² multiply-adds for N = 2D and m markers.
// With marker offsets in the state (see Estimator), a marker measures its
// node plus its offset, so its rows of H have two ones: P·Hᵀ is a sum of
// two sets of rows of P and H·P·Hᵀ a sum of four 3×3 blocks.
// e.world holds the markers' world positions, in observation order.
func (e *Estimator) gateAndUpdate(markers []MarkerObs, rep *EstimatorReport) error {
	n := e.n
	p, x := e.wCov, e.wMean
	r := e.markers.NoiseM*e.markers.NoiseM + MarkerNoiseFloorM*MarkerNoiseFloorM
	e.accepted = e.accepted[:0]
	for i, mo := range markers {
		c, o := 3*e.markers.Nodes[mo.Marker], e.offsetIndex(mo.Marker)
		var nu [3]float64
		var s [9]float64
		for a := range 3 {
			nu[a] = e.world[i][a] - x[c+a]
			for b := range 3 {
				s[3*a+b] = p[(c+a)*n+c+b]
			}
			if o >= 0 {
				nu[a] -= x[o+a]
				for b := range 3 {
					s[3*a+b] += p[(c+a)*n+o+b] + p[(o+a)*n+c+b] + p[(o+a)*n+o+b]
				}
			}
			s[4*a] += r
		}
		chi2, ok := chi2of3(&s, &nu)
		if !ok {
			return fmt.Errorf("%w: marker %d (node %d)", ErrInnovation, mo.Marker, c/3)
		}
		if chi2 > e.set.GateChi2 {
			rep.Rejected = append(rep.Rejected, RejectedMarker{Marker: mo.Marker, Chi2: chi2})
			continue
		}
		e.accepted = append(e.accepted, i)
	}
	if nr := len(rep.Rejected); nr >= 2 && 2*nr > len(markers) {
		// Most markers disagree with the state: trust the markers.
		rep.GateOverruled = true
		rep.Rejected = rep.Rejected[:0]
		e.accepted = e.accepted[:0]
		for i := range markers {
			e.accepted = append(e.accepted, i)
		}
	}
	rep.MarkersUsed = len(e.accepted)
	k := 3 * len(e.accepted)
	if k == 0 {
		return nil
	}
	// S, ν and the rows of P for the measured coordinates.
	s, nu, wt := e.sMat[:k*k], e.innov[:k], e.wt[:k*n]
	for ai, i := range e.accepted {
		ci, oi := 3*e.markers.Nodes[markers[i].Marker], e.offsetIndex(markers[i].Marker)
		for a := range 3 {
			row := 3*ai + a
			w := wt[row*n : (row+1)*n]
			nu[row] = e.world[i][a] - x[ci+a]
			copy(w, p[(ci+a)*n:(ci+a+1)*n])
			if oi >= 0 {
				nu[row] -= x[oi+a]
				floats.Add(w, p[(oi+a)*n:(oi+a+1)*n])
			}
			for bj, j := range e.accepted {
				cj, oj := 3*e.markers.Nodes[markers[j].Marker], e.offsetIndex(markers[j].Marker)
				for b := range 3 {
					v := w[cj+b]
					if oj >= 0 {
						v += w[oj+b]
					}
					s[row*k+3*bj+b] = v
				}
			}
			s[row*k+row] += r
		}
	}
	if !choleskyLower(s, k) {
		return fmt.Errorf("%w: %d markers", ErrInnovation, len(e.accepted))
	}
	// W = L⁻¹·(H·P) and y = L⁻¹·ν by forward substitution, row by row.
	for row := 0; row < k; row++ {
		wr := wt[row*n : (row+1)*n]
		for c := 0; c < row; c++ {
			l := s[row*k+c]
			floats.AddScaled(wr, -l, wt[c*n:(c+1)*n])
			nu[row] -= l * nu[c]
		}
		inv := 1 / s[row*k+row]
		floats.Scale(inv, wr)
		nu[row] *= inv
	}
	// x ← x + Wᵀ·y.
	for row := 0; row < k; row++ {
		floats.AddScaled(x, nu[row], wt[row*n:(row+1)*n])
	}
	// P ← P − Wᵀ·W on the upper triangle, then mirrored. (Blocking the
	// rows of P for cache made no measurable difference at 150 nodes on
	// the development machine, so the loop stays plain.)
	for i := 0; i < n; i++ {
		pi := p[i*n+i : (i+1)*n]
		for row := 0; row < k; row++ {
			if v := wt[row*n+i]; v != 0 {
				floats.AddScaled(pi, -v, wt[row*n+i:(row+1)*n])
			}
		}
	}
	for i := 0; i < n; i++ {
		for j := i + 1; j < n; j++ {
			p[j*n+i] = p[i*n+j]
		}
	}
	return nil
}

// offsetIndex returns the state index of marker m's first offset
// coordinate, or −1 without marker offsets.
func (e *Estimator) offsetIndex(m int) int {
	if e.no == 0 {
		return -1
	}
	return 2*e.d + 3*m
}

// chi2of3 returns νᵀS⁻¹ν for a 3×3 symmetric S (row-major), and false if
// S is not positive definite.
func chi2of3(s *[9]float64, nu *[3]float64) (float64, bool) {
	// Cholesky S = L·Lᵀ written out for 3×3 (no slices, so nothing escapes).
	l00 := s[0]
	if !(l00 > 0) || math.IsInf(l00, 0) {
		return 0, false
	}
	l00 = math.Sqrt(l00)
	l10, l20 := s[3]/l00, s[6]/l00
	l11 := s[4] - l10*l10
	if !(l11 > 0) || math.IsInf(l11, 0) {
		return 0, false
	}
	l11 = math.Sqrt(l11)
	l21 := (s[7] - l20*l10) / l11
	l22 := s[8] - l20*l20 - l21*l21
	if !(l22 > 0) || math.IsInf(l22, 0) {
		return 0, false
	}
	l22 = math.Sqrt(l22)
	y0 := nu[0] / l00
	y1 := (nu[1] - l10*y0) / l11
	y2 := (nu[2] - l20*y0 - l21*y1) / l22
	return y0*y0 + y1*y1 + y2*y2, true
}

// choleskyLower overwrites the lower triangle of the k×k symmetric matrix
// a (row-major) with L, a = L·Lᵀ, and reports false if a is not positive
// definite (a pivot that is not positive and finite). The upper triangle is
// left as it was.
func choleskyLower(a []float64, k int) bool {
	for j := 0; j < k; j++ {
		rj := a[j*k : j*k+j]
		d := a[j*k+j] - floats.Dot(rj, rj)
		if !(d > 0) || math.IsInf(d, 0) {
			return false
		}
		d = math.Sqrt(d)
		a[j*k+j] = d
		for i := j + 1; i < k; i++ {
			a[i*k+j] = (a[i*k+j] - floats.Dot(a[i*k:i*k+j], rj)) / d
		}
	}
	return true
}
