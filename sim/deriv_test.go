package sim

import (
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/diff/fd"
	"gonum.org/v1/gonum/mat"
)

// The finite-difference reference throughout is gonum's diff/fd with the
// central formula; the tolerance 1e-6 on the matrix-relative error is the
// issue's requirement. With steps of 1e-6 m the central formula's
// truncation error is O(step²·third derivative) ≈ 1e-12 relative and its
// rounding error O(eps/step) ≈ 1e-10, both far below the tolerance.

const fdTol = 1e-6

func fdSettings() *fd.JacobianSettings {
	return &fd.JacobianSettings{Formula: fd.Central, Step: 1e-6}
}

// The gradient G and the exact Hessian A of the incremental objective
// against central differences of E and of G.
func TestGradientAndHessianAgainstFiniteDifferences(t *testing.T) {
	m, anchors := puppetModel(t, ModelSettings{})
	rest := make([]float64, m.Dim())
	m.InitialState(rest)
	rng := rand.New(rand.NewPCG(1, 2))
	ws := m.NewWorkspace()
	for trial := range 3 {
		xCur, xPrev := randomMotion(m, rest, rng, 0.01, 0.2)
		m.loadStates(ws, xCur, xPrev)
		copy(ws.anchors, anchors)
		x, _ := randomMotion(m, xCur, rng, 0.005, 0)
		g := make([]float64, m.Dim())
		energy := func(x []float64) float64 {
			e, _ := m.incremental(make([]float64, len(x)), x, &ws.in, m.h, hessNone, nil, nil)
			return e
		}
		m.incremental(g, x, &ws.in, m.h, hessNone, nil, nil)
		gFD := fd.Gradient(nil, func(v []float64) float64 {
			// Anchored entries must stay at their file positions.
			w := append([]float64(nil), v...)
			for i := range m.nNodes {
				if m.anchored[i] {
					copy(w[3*i:3*i+3], m.fixedPos[3*i:3*i+3])
				}
			}
			return energy(w)
		}, x, &fd.Settings{Formula: fd.Central, Step: 1e-6})
		if e := relErr(mat.NewVecDense(len(g), g), mat.NewVecDense(len(gFD), gFD)); e > fdTol {
			t.Errorf("trial %d: gradient relative error %.2g", trial, e)
		}
		var hess bandMatrix
		hess.reset(3*len(m.order), m.kd)
		m.incremental(g, x, &ws.in, m.h, hessExact, &hess, nil)
		got := bandToDense(&hess)
		want := mat.NewDense(hess.n, hess.n, nil)
		// Differentiate G in band order over the free coordinates.
		free := make([]float64, hess.n)
		m.toBand(free, x)
		xw := append([]float64(nil), x...)
		gw := make([]float64, m.Dim())
		fd.Jacobian(want, func(dst, v []float64) {
			for p, i := range m.order {
				copy(xw[3*i:3*i+3], v[3*p:3*p+3])
			}
			m.incremental(gw, xw, &ws.in, m.h, hessNone, nil, nil)
			m.toBand(dst, gw)
		}, free, fdSettings())
		e := relErr(got, want)
		if e > fdTol {
			t.Errorf("trial %d: Hessian relative error %.2g", trial, e)
		}
		t.Logf("trial %d: Hessian relative error %.2g", trial, e)
	}
}

// stepFunc returns x⁺ as a function of one of the step's inputs.
func stepFunc(t *testing.T, m *Model, xCur, xPrev, anchors []float64, which string) (func(dst, v []float64), []float64) {
	ws := m.NewWorkspace()
	return func(dst, v []float64) {
		xc, xp, an := xCur, xPrev, anchors
		switch which {
		case "cur":
			xc = v
		case "prev":
			xp = v
		case "anchors":
			an = v
		}
		if err := m.Step(ws, dst, xc, xp, an); err != nil {
			t.Fatalf("step for finite differences: %v", err)
		}
	}, map[string][]float64{"cur": xCur, "prev": xPrev, "anchors": anchors}[which]
}

// ∂x⁺/∂x_t, ∂x⁺/∂x_{t−1}, ∂x⁺/∂a from SensitivityMatrices and from
// Sensitivity against central differences of Step itself.
func TestStepSensitivityAgainstFiniteDifferences(t *testing.T) {
	m, anchors := puppetModel(t, ModelSettings{GradTol: 1e-15})
	t.Run("free", func(t *testing.T) { checkStepSensitivity(t, m, anchors) })
	// The same puppet with its left foot pinned: anchored rows and columns.
	fig := m.Figure()
	fig.Nodes[fig.NodeIndex("l_foot")].Anchored = true
	pinned, err := NewModel(fig, m.Strings(), ModelSettings{StepS: m.StepS(), GradTol: 1e-15})
	if err != nil {
		t.Fatal(err)
	}
	t.Run("pinned", func(t *testing.T) { checkStepSensitivity(t, pinned, anchors) })
}

func checkStepSensitivity(t *testing.T, m *Model, anchors []float64) {
	rest := make([]float64, m.Dim())
	if err := m.RestPose(m.NewWorkspace(), rest, anchors); err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(3, 4))
	ws := m.NewWorkspace()
	for trial := range 3 {
		xCur, xPrev := randomMotion(m, rest, rng, 0.003, 0.1)
		an := append([]float64(nil), anchors...)
		for k := range an {
			an[k] += 0.002 * (2*rng.Float64() - 1)
		}
		xNext := make([]float64, m.Dim())
		if err := m.Step(ws, xNext, xCur, xPrev, an); err != nil {
			t.Fatal(err)
		}
		var dCur, dPrev, dAn mat.Dense
		ws.SensitivityMatrices(&dCur, &dPrev, &dAn)
		for _, c := range []struct {
			which string
			got   *mat.Dense
		}{{"cur", &dCur}, {"prev", &dPrev}, {"anchors", &dAn}} {
			f, at := stepFunc(t, m, xCur, xPrev, an, c.which)
			want := mat.NewDense(m.Dim(), len(at), nil)
			fd.Jacobian(want, f, at, fdSettings())
			e := relErr(c.got, want)
			if e > fdTol {
				t.Errorf("trial %d: ∂x⁺/∂%s relative error %.2g", trial, c.which, e)
			}
			t.Logf("trial %d: ∂x⁺/∂%s relative error %.2g (max entry %.3g)", trial, c.which, e, mat.Norm(want, 1))
			// One direction through Sensitivity must match the matrix.
			dir := make([]float64, len(at))
			for k := range dir {
				dir[k] = rng.NormFloat64()
			}
			out := make([]float64, m.Dim())
			switch c.which {
			case "cur":
				ws.Sensitivity(out, dir, nil, nil)
			case "prev":
				ws.Sensitivity(out, nil, dir, nil)
			case "anchors":
				ws.Sensitivity(out, nil, nil, dir)
			}
			var wantDir mat.VecDense
			wantDir.MulVec(want, mat.NewVecDense(len(dir), dir))
			if e := relErr(mat.NewVecDense(len(out), out), &wantDir); e > fdTol {
				t.Errorf("trial %d: Sensitivity along a direction of %s: relative error %.2g", trial, c.which, e)
			}
		}
	}
}
