package sim

import (
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// randomSPDBand returns a random symmetric positive definite band matrix
// (diagonally dominant, so positive definite by Gershgorin's theorem) in
// band storage and as a dense reference.
func randomSPDBand(rng *rand.Rand, n, kd int) (*bandMatrix, *mat.SymDense) {
	b := &bandMatrix{}
	b.reset(n, kd)
	d := mat.NewSymDense(n, nil)
	for i := range n {
		for j := max(0, i-kd); j < i; j++ {
			v := 2*rng.Float64() - 1
			b.add(i, j, v)
			d.SetSym(i, j, v)
		}
	}
	for i := range n {
		v := 2*float64(kd) + 1 + rng.Float64()
		b.add(i, i, v)
		d.SetSym(i, i, v)
	}
	return b, d
}

// The band Cholesky solve against gonum's dense Cholesky (the reference
// library), for one and for several right-hand sides.
func TestBandCholeskyMatchesDense(t *testing.T) {
	rng := rand.New(rand.NewPCG(13, 14))
	for _, c := range []struct{ n, kd, k int }{{1, 0, 1}, {7, 2, 1}, {30, 5, 4}, {60, 8, 24}, {20, 25, 3}} {
		b, d := randomSPDBand(rng, c.n, min(c.kd, c.n-1))
		var ch mat.Cholesky
		if !ch.Factorize(d) {
			t.Fatal("reference matrix not positive definite")
		}
		rhs := mat.NewDense(c.n, c.k, nil)
		for i := range c.n {
			for j := range c.k {
				rhs.Set(i, j, rng.NormFloat64())
			}
		}
		var want mat.Dense
		if err := ch.SolveTo(&want, rhs); err != nil {
			t.Fatal(err)
		}
		if !b.factorize() {
			t.Fatalf("%+v: band factorisation failed", c)
		}
		got := mat.DenseCopyOf(rhs)
		b.solve(got.RawMatrix().Data, c.k)
		if e := relErr(got, &want); e > 1e-12 {
			t.Errorf("%+v: relative error %.2g against mat.Cholesky", c, e)
		}
	}
}

func TestBandCholeskyRefusesIndefinite(t *testing.T) {
	var b bandMatrix
	b.reset(3, 1)
	b.add(0, 0, 1)
	b.add(1, 0, 2) // [[1,2],[2,1]] block: eigenvalues 3 and −1
	b.add(1, 1, 1)
	b.add(2, 2, 1)
	if b.factorize() {
		t.Error("an indefinite matrix was factorised")
	}
}
