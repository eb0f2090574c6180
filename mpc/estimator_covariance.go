package mpc

import "gonum.org/v1/gonum/blas/blas64"

// propagate replaces the full 2D×2D covariance p (row-major, both
// triangles) by F·p·Fᵀ + Q for the last process step, where
//
//	F = [ G ],  G = [∂x_{k+1}/∂x_k  ∂x_{k+1}/∂x_{k−1}]  (D×2D),
//	    [I 0]
//
// without forming F or G: with T = G·p (D×2D),
//
//	new P11 = G·Tᵀ + Q11 (= G·p·Gᵀ + Q11),  new P12 = T[:, :D] (= A·P11 + B·P21),
//	new P21 = new P12ᵀ,                      new P22 = old P11.
//
// G is applied through Process.TangentTo, 2D directions for T and D for
// G·Tᵀ. For a sim figure each direction costs a pair of band triangular
// solves with the step's factor (half-bandwidth kd), so a propagation
// costs about 12·D²·kd flops; forming G densely and multiplying costs
// 10·D³ for the products alone (5·D³ multiply-adds, exploiting the block
// structure of F) on top of 8·D²·kd for G itself, and the plain dense
// F·p·Fᵀ 32·D³. Measured in BenchmarkCovariancePropagation. Q is diagonal,
// on the x_{k+1} block only: q11 holds its diagonal.
func (e *Estimator) propagate(p []float64, q11 []float64) {
	d := e.d
	n := 2 * d
	e.top.SetRawMatrix(blas64.General{Rows: d, Cols: n, Stride: n, Data: p[:d*n]})
	e.bot.SetRawMatrix(blas64.General{Rows: d, Cols: n, Stride: n, Data: p[d*n:]})
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
	// New P22 = old P11: copy it before P11 is overwritten.
	for i := 0; i < d; i++ {
		copy(p[(d+i)*n+d:(d+i+1)*n], p[i*n:i*n+d])
	}
	for i := 0; i < d; i++ {
		// New P12 row i = T row i, first half; P21 is its transpose.
		copy(p[i*n+d:(i+1)*n], t[i*n:i*n+d])
		for j := 0; j < d; j++ {
			p[(d+j)*n+i] = t[i*n+j]
		}
		// New P11, symmetrised (G·Tᵀ is symmetric up to rounding).
		for j := i; j < d; j++ {
			v := 0.5 * (s[i*d+j] + s[j*d+i])
			if i == j {
				v += q11[i]
			}
			p[i*n+j] = v
			p[j*n+i] = v
		}
	}
}
