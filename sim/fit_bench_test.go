package sim

import (
	"testing"

	"gonum.org/v1/gonum/mat"
)

// BenchmarkFitResiduals evaluates the fit's residuals and Jacobian (10
// parameters: rest lengths, mass scale, damping scales, tracker offset)
// over a 3 s run of the demo figure at 100 Hz: one Levenberg–Marquardt
// evaluation.
func BenchmarkFitResiduals(b *testing.B) {
	cell := loadDemoCell(b)
	params, truth, run := truthCell(b, cell, 0.001, 300)
	prob := &FitProblem{Cell: cell, Params: params, Runs: []FitRun{run}}
	r := make([]float64, prob.NumResiduals())
	jac := mat.NewDense(len(r), len(params), nil)
	b.ReportAllocs()
	for b.Loop() {
		if err := prob.Residuals(r, jac, truth); err != nil {
			b.Fatal(err)
		}
	}
}
