package sim

import "math"

// bandMatrix is a symmetric band matrix with kd sub-diagonals, or its
// Cholesky factor L (A = L·Lᵀ) after factorize. Storage is by rows, lower
// triangle: row i holds columns i−kd … i at data[i*(kd+1):(i+1)*(kd+1)],
// the diagonal last; entries left of column 0 are zero padding.
//
// It is the project's own small routine rather than gonum's BandCholesky
// because that one also estimates the condition number on every
// factorisation (several extra band solves) and its multi-right-hand-side
// solve works column by column; see BenchmarkFactor* for the comparison.
type bandMatrix struct {
	n, kd   int
	data    []float64
	invDiag []float64 // 1/L[i][i] after factorize
}

// reset sizes b for n×n with kd sub-diagonals and zeroes it, reusing storage.
func (b *bandMatrix) reset(n, kd int) {
	b.n, b.kd = n, kd
	size := n * (kd + 1)
	if cap(b.data) < size {
		b.data = make([]float64, size)
		b.invDiag = make([]float64, n)
	}
	b.data = b.data[:size]
	b.invDiag = b.invDiag[:n]
	clear(b.data)
}

// add adds v at (i, j), i ≥ j, i−j ≤ kd.
func (b *bandMatrix) add(i, j int, v float64) {
	b.data[i*(b.kd+1)+j-i+b.kd] += v
}

// addBlock adds the 3×3 block h (row-major), times sign, at block rows
// 3p…3p+2 and columns 3q…3q+2 for p > q, or the lower triangle of it for
// p == q.
func (b *bandMatrix) addBlock(p, q int, h *[9]float64, sign float64) {
	w := b.kd + 1
	if p != q {
		// Rows 3p+r, columns 3q…3q+2 sit at offsets 3q−(3p+r)+kd … +2.
		for r := range 3 {
			i := 3*p + r
			o := i*w + 3*q - i + b.kd
			row := b.data[o : o+3 : o+3]
			row[0] += sign * h[3*r]
			row[1] += sign * h[3*r+1]
			row[2] += sign * h[3*r+2]
		}
		return
	}
	for r := range 3 {
		i := 3*p + r
		row := b.data[i*w : (i+1)*w]
		cmax := 2
		if p == q {
			cmax = r
		}
		for c := 0; c <= cmax; c++ {
			row[3*q+c-i+b.kd] += sign * h[3*r+c]
		}
	}
}

// factorize overwrites b with its Cholesky factor. It returns false if the
// matrix is not (numerically) positive definite.
func (b *bandMatrix) factorize() bool {
	// Row-oriented (Cholesky–Banachiewicz) on the raw storage: L[i][p] is
	// at data[oi+p] with oi = i·(kd+1) − i + kd. Indexing the backing
	// array directly, rather than slicing rows for a dot-product call,
	// measured 40% faster at the half-bandwidths of figures (about 8).
	n, kd, w := b.n, b.kd, b.kd+1
	data := b.data
	for i := range n {
		oi := i*w - i + kd
		j0 := max(0, i-kd)
		for j := j0; j <= i; j++ {
			oj := j*w - j + kd
			s := data[oi+j]
			p := j0
			for ; p+2 <= j; p += 2 {
				s -= data[oi+p]*data[oj+p] + data[oi+p+1]*data[oj+p+1]
			}
			if p < j {
				s -= data[oi+p] * data[oj+p]
			}
			if j < i {
				data[oi+j] = s * b.invDiag[j]
				continue
			}
			if !(s > 0) || math.IsInf(s, 0) {
				return false
			}
			d := math.Sqrt(s)
			data[oi+i] = d
			b.invDiag[i] = 1 / d
		}
	}
	return true
}

// solve overwrites x (n×k, row-major, row stride k) with A⁻¹x using the
// factor.
func (b *bandMatrix) solve(x []float64, k int) {
	n, kd, w := b.n, b.kd, b.kd+1
	if len(x) != n*k {
		panic("sim: band solve: wrong right-hand side size")
	}
	if k == 1 {
		for i := range n {
			ri := b.data[i*w : (i+1)*w]
			j0 := max(0, i-kd)
			s := x[i]
			l := ri[j0-i+kd : kd]
			xs := x[j0:i]
			for p, v := range l {
				s -= v * xs[p]
			}
			x[i] = s * b.invDiag[i]
		}
		for i := n - 1; i >= 0; i-- {
			ri := b.data[i*w : (i+1)*w]
			j0 := max(0, i-kd)
			xi := x[i] * b.invDiag[i]
			x[i] = xi
			l := ri[j0-i+kd : kd]
			xs := x[j0:i]
			for p, v := range l {
				xs[p] -= v * xi
			}
		}
		return
	}
	// Forward: L y = x.
	for i := range n {
		ri := b.data[i*w : (i+1)*w]
		xi := x[i*k : (i+1)*k]
		for p := max(0, i-kd); p < i; p++ {
			l := ri[p-i+kd]
			if l == 0 {
				continue
			}
			axpyNeg(xi, l, x[p*k:(p+1)*k])
		}
		d := b.invDiag[i]
		for c := range xi {
			xi[c] *= d
		}
	}
	// Backward: Lᵀ x = y.
	for i := n - 1; i >= 0; i-- {
		ri := b.data[i*w : (i+1)*w]
		xi := x[i*k : (i+1)*k]
		d := b.invDiag[i]
		for c := range xi {
			xi[c] *= d
		}
		for p := max(0, i-kd); p < i; p++ {
			l := ri[p-i+kd]
			if l == 0 {
				continue
			}
			axpyNeg(x[p*k:(p+1)*k], l, xi)
		}
	}
}

// axpyNeg does dst −= a·src (equal lengths), four at a time.
func axpyNeg(dst []float64, a float64, src []float64) {
	src = src[:len(dst)]
	c := 0
	for ; c+4 <= len(dst); c += 4 {
		d := dst[c : c+4 : c+4]
		s := src[c : c+4 : c+4]
		d[0] -= a * s[0]
		d[1] -= a * s[1]
		d[2] -= a * s[2]
		d[3] -= a * s[3]
	}
	for ; c < len(dst); c++ {
		dst[c] -= a * src[c]
	}
}
