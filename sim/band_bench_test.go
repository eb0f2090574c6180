package sim

import (
	"fmt"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// stepHessian returns the exact step Hessian of a bench figure in band
// storage and as gonum band and dense matrices.
func stepHessian(b *testing.B, n int) (*bandMatrix, *mat.SymBandDense, *mat.SymDense) {
	m, anchors := benchFigure(b, n, 0.01)
	xCur, xPrev := benchMotion(b, m, anchors)
	ws := m.NewWorkspace()
	xNext := make([]float64, m.Dim())
	if err := m.Step(ws, xNext, xCur, xPrev, anchors); err != nil {
		b.Fatal(err)
	}
	var h bandMatrix
	h.reset(3*len(m.order), m.kd)
	m.incremental(ws.gTry, xNext, m.newStepInputs(ws.xc, ws.y, anchors), m.h, hessExact, &h, nil)
	dense := bandToDense(&h)
	sb := mat.NewSymBandDense(h.n, h.kd, nil)
	sd := mat.NewSymDense(h.n, nil)
	for i := range h.n {
		for j := i; j <= min(h.n-1, i+h.kd); j++ {
			sb.SetSymBand(i, j, dense.At(i, j))
		}
		for j := i; j < h.n; j++ {
			sd.SetSym(i, j, dense.At(i, j))
		}
	}
	return &h, sb, sd
}

// The factorisation choice, by measurement: the project's band Cholesky
// against gonum's BandCholesky and dense Cholesky on the same step Hessian,
// each factorising and solving 24 right-hand sides.
func BenchmarkFactorSolve24(b *testing.B) {
	const k = 24
	for _, n := range benchSizes {
		h, sb, sd := stepHessian(b, n)
		rhs := make([]float64, h.n*k)
		for i := range rhs {
			rhs[i] = float64(i%7) - 3
		}
		b.Run(fmt.Sprintf("own-band/nodes=%d", n), func(b *testing.B) {
			var f bandMatrix
			x := make([]float64, len(rhs))
			b.ReportAllocs()
			cpu0 := benchCPUSeconds()
			for b.Loop() {
				f.reset(h.n, h.kd)
				copy(f.data, h.data)
				if !f.factorize() {
					b.Fatal("not positive definite")
				}
				copy(x, rhs)
				f.solve(x, k)
			}
			b.ReportMetric(1e9*(benchCPUSeconds()-cpu0)/float64(b.N), "cpu-ns/op")
		})
		b.Run(fmt.Sprintf("gonum-band/nodes=%d", n), func(b *testing.B) {
			var f mat.BandCholesky
			x := mat.NewDense(h.n, k, nil)
			r := mat.NewDense(h.n, k, rhs)
			b.ReportAllocs()
			cpu0 := benchCPUSeconds()
			for b.Loop() {
				if !f.Factorize(sb) {
					b.Fatal("not positive definite")
				}
				_ = f.SolveTo(x, r)
			}
			b.ReportMetric(1e9*(benchCPUSeconds()-cpu0)/float64(b.N), "cpu-ns/op")
		})
		b.Run(fmt.Sprintf("gonum-dense/nodes=%d", n), func(b *testing.B) {
			var f mat.Cholesky
			x := mat.NewDense(h.n, k, nil)
			r := mat.NewDense(h.n, k, rhs)
			b.ReportAllocs()
			cpu0 := benchCPUSeconds()
			for b.Loop() {
				if !f.Factorize(sd) {
					b.Fatal("not positive definite")
				}
				_ = f.SolveTo(x, r)
			}
			b.ReportMetric(1e9*(benchCPUSeconds()-cpu0)/float64(b.N), "cpu-ns/op")
		})
	}
}
