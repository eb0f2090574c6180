package mpc

import "gonum.org/v1/gonum/blas/blas64"

// propagate replaces the full n×n covariance p (row-major, both
// triangles; n = 2D + no with no marker offset coordinates) by F·p·Fᵀ + Q
// for the last process step, where
//
//	F = [ G   0 ],  G = [∂x_{k+1}/∂x_k  ∂x_{k+1}/∂x_{k−1}]  (D×2D),
//	    [I 0  0 ]
//	    [ 0   I ]   (the marker offsets are a random walk)
//
// without forming F or G: with T = G·p[:2D, :] (D×n),
//
//	new P11 = G·T[:, :2D]ᵀ + Q11 (= G·p·Gᵀ + Q11),  new P12 = T[:, :D] (= A·P11 + B·P21),
//	new P1o = T[:, 2D:],  new P22 = old P11,  new P2o = old P1o,  new Poo = old Poo + Qoo,
//
// and the blocks below the diagonal mirrored. G is applied through
// Process.TangentTo, n directions for T and 2D for G·Tᵀ. For a sim figure
// each direction costs a pair of band triangular solves with the step's
// factor (half-bandwidth kd), so a propagation costs about 12·D²·kd flops
// without offsets; forming G densely and multiplying costs 10·D³ for the
// products alone (5·D³ multiply-adds, exploiting the block structure of F)
// on top of 8·D²·kd for G itself, and the plain dense F·p·Fᵀ 32·D³.
// Measured in BenchmarkCovariancePropagation. Q is diagonal: q holds the
// diagonal of Q11 (length D), then, if p has offsets, that of Qoo.
func (e *Estimator) propagate(p []float64, q []float64) {
	d := e.d
	n := e.n
	e.top.SetRawMatrix(blas64.General{Rows: d, Cols: n, Stride: n, Data: p[:d*n]})
	e.bot.SetRawMatrix(blas64.General{Rows: d, Cols: n, Stride: n, Data: p[d*n : 2*d*n]})
	e.proc.TangentTo(e.tMat, &e.top, &e.bot) // T = G·p: the columns of p are the directions
	t := e.tMat.RawMatrix().Data
	tt1, tt2 := e.tt1.RawMatrix().Data, e.tt2.RawMatrix().Data
	for i := 0; i < d; i++ {
		for j := 0; j < d; j++ {
			tt1[j*d+i] = t[i*n+j]
			tt2[j*d+i] = t[i*n+d+j]
		}
	}
	e.proc.TangentTo(e.s11, e.tt1, e.tt2) // G·Tᵀ: the rows of T are the directions
	s := e.s11.RawMatrix().Data
	// New P22 = old P11 and new P2o = old P1o: copy them before row i of
	// P11 and P1o is overwritten.
	for i := 0; i < d; i++ {
		copy(p[(d+i)*n+d:(d+i)*n+2*d], p[i*n:i*n+d])
		copy(p[(d+i)*n+2*d:(d+i+1)*n], p[i*n+2*d:(i+1)*n])
		for j := 2 * d; j < n; j++ {
			p[j*n+d+i] = p[(d+i)*n+j] // Po2 = P2oᵀ
		}
	}
	for i := 0; i < d; i++ {
		// New P12 row i = T row i, first half; P21 is its transpose.
		copy(p[i*n+d:i*n+2*d], t[i*n:i*n+d])
		for j := 0; j < d; j++ {
			p[(d+j)*n+i] = t[i*n+j]
		}
		// New P1o row i = T row i, offset part; Po1 is its transpose.
		copy(p[i*n+2*d:(i+1)*n], t[i*n+2*d:(i+1)*n])
		for j := 2 * d; j < n; j++ {
			p[j*n+i] = t[i*n+j]
		}
		// New P11, symmetrised (G·Tᵀ is symmetric up to rounding).
		for j := i; j < d; j++ {
			v := 0.5 * (s[i*d+j] + s[j*d+i])
			if i == j {
				v += q[i]
			}
			p[i*n+j] = v
			p[j*n+i] = v
		}
	}
	for j := 2 * d; j < n; j++ {
		p[j*n+j] += q[j-d]
	}
}
