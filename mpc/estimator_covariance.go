package mpc

import "gonum.org/v1/gonum/floats"

// covBlockRows is the number of matrix rows the covariance kernels keep in
// cache at a time: 32 rows of a 150-node figure's 900-wide covariance are
// 230 kB, inside a typical 512 kB–1 MB level-2 cache. On the 2-core
// development machine (large caches) blocking made no measurable
// difference (150 nodes: about 0.10 s of CPU per propagation either way);
// it is kept for machines with smaller caches, where the unblocked loops
// stream the whole covariance from memory once per row of the result.
const covBlockRows = 32

// propagateCovariance replaces the full 2D×2D covariance p (row-major, both
// triangles) by F·p·Fᵀ + Q for F = [[A, B], [I, 0]] without forming F.
// With G = [A B] (D×2D) and T = G·p:
//
//	new P11 = T·Gᵀ + Q11,  new P12 = T[:, :D] (= A·P11 + B·P21),
//	new P21 = new P12ᵀ,    new P22 = old P11,
//
// 5·D³ multiply-adds (T: 4D³, the upper triangle of T·Gᵀ: D³) against
// 16·D³ for the dense product with the 2D×2D F. The kernels are axpy and
// dot loops on gonum's floats (assembly on amd64), serial: no goroutines,
// no allocation. q11 holds Q11's diagonal (Q is diagonal and lives on the
// x_{k+1} block only).
func propagateCovariance(p []float64, d int, a, b []float64, q11 []float64, g, t, s11 []float64) {
	n := 2 * d
	// G = [A B].
	for i := 0; i < d; i++ {
		copy(g[i*n:i*n+d], a[i*d:(i+1)*d])
		copy(g[i*n+d:(i+1)*n], b[i*d:(i+1)*d])
	}
	// T = G·P, row by row: T_i = Σ_k G_ik P_k, over blocks of rows of P
	// small enough to stay in cache while every T_i passes over them.
	clear(t[:d*n])
	for kb := 0; kb < n; kb += covBlockRows {
		ke := min(kb+covBlockRows, n)
		for i := 0; i < d; i++ {
			ti := t[i*n : (i+1)*n]
			for k := kb; k < ke; k++ {
				if gik := g[i*n+k]; gik != 0 {
					floats.AddScaled(ti, gik, p[k*n:(k+1)*n])
				}
			}
		}
	}
	// New P11 (upper triangle) = T·Gᵀ + Q11, over blocks of rows of G.
	for jb := 0; jb < d; jb += covBlockRows {
		je := min(jb+covBlockRows, d)
		for i := 0; i < je; i++ {
			ti := t[i*n : (i+1)*n]
			for j := max(i, jb); j < je; j++ {
				s11[i*d+j] = floats.Dot(ti, g[j*n:(j+1)*n])
			}
		}
	}
	for i := 0; i < d; i++ {
		s11[i*d+i] += q11[i]
	}
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
		// New P11, mirrored.
		for j := i; j < d; j++ {
			v := s11[i*d+j]
			p[i*n+j] = v
			p[j*n+i] = v
		}
	}
}
