package sim

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/diff/fd"
	"gonum.org/v1/gonum/mat"
)

// withParam returns m rebuilt with parameter p set to v.
func withParam(t *testing.T, m *Model, p Param, v float64) *Model {
	fig, strs := m.Figure(), m.Strings()
	switch p.Kind {
	case StringRestLength:
		strs[p.Index].RestLengthM = v
	case StringStiffness:
		strs[p.Index].StiffnessNPerM = v
	case NodeMass:
		fig.Nodes[p.Index].MassKg = v
	case NodeDrag:
		fig.Nodes[p.Index].DragNsPerM = v
	case RodRestLength:
		fig.Rods[p.Index].RestLengthM = v
	case RodStiffness:
		fig.Rods[p.Index].StiffnessNPerM = v
	case RodDamping:
		fig.Rods[p.Index].DampingNsPerM = v
	}
	out, err := NewModel(fig, strs, ModelSettings{StepS: m.h, GravityMPerS2: m.gravity, SlackWidthM: m.slackW, GradTol: m.gradTol, MaxNewtonIters: m.maxIters})
	if err != nil {
		t.Fatal(err)
	}
	return out
}

func paramValue(m *Model, p Param) float64 {
	switch p.Kind {
	case StringRestLength:
		return m.strs[p.Index].RestLengthM
	case StringStiffness:
		return m.strs[p.Index].StiffnessNPerM
	case NodeMass:
		return m.mass[p.Index]
	case NodeDrag:
		return m.drag[p.Index]
	case RodRestLength:
		return m.rods[p.Index].restLen
	case RodStiffness:
		return m.rods[p.Index].k
	}
	return m.rods[p.Index].c
}

var testParams = []Param{
	{StringRestLength, 0}, {StringRestLength, 3}, {StringStiffness, 1},
	{NodeMass, 0}, {NodeMass, 5}, {NodeDrag, 2},
	{RodRestLength, 0}, {RodRestLength, 7}, {RodStiffness, 3}, {RodDamping, 4},
}

// Parameter sensitivities of one step and of a rollout against central
// differences (gonum diff/fd) of steps and rollouts of rebuilt models.
// The parameters' scales differ a lot (a drag of 0.003 N·s/m moves the
// figure by micrometres, a rest length by its own change), so the
// finite-difference step is chosen to change the states by about 1e-7 m
// (capped at 1% of the value), keeping both the rounding error (eps·|x| /
// change) and the truncation error far below the tolerance — common
// practice for scaling a difference step.
func TestParamSensitivityAgainstFiniteDifferences(t *testing.T) {
	const steps = 5
	m, anchors := puppetModel(t, ModelSettings{GradTol: 1e-15})
	rest := make([]float64, m.Dim())
	if err := m.RestPose(m.NewWorkspace(), rest, anchors); err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(22, 23))
	xCur, xPrev := randomMotion(m, rest, rng, 0.003, 0.1)
	ws := m.NewWorkspace()
	xNext := make([]float64, m.Dim())
	if err := m.Step(ws, xNext, xCur, xPrev, anchors); err != nil {
		t.Fatal(err)
	}
	ans := make([]float64, steps*len(anchors))
	for s := range steps {
		for j := range anchors {
			ans[s*len(anchors)+j] = anchors[j] + 0.001*float64(s)*(2*rng.Float64()-1)
		}
	}
	r := m.NewRollout(steps)
	if err := r.Run(xCur, xPrev, ans); err != nil {
		t.Fatal(err)
	}
	dX := make([]*mat.Dense, steps)
	for s := range dX {
		dX[s] = mat.NewDense(m.Dim(), len(testParams), nil)
	}
	r.ParamTangent(dX, testParams)
	for j, p := range testParams {
		v0 := paramValue(m, p)
		// One step.
		got := make([]float64, m.Dim())
		ws.ParamSensitivity(got, p)
		var size float64
		for s := range steps {
			for i := range m.Dim() {
				size = max(size, math.Abs(dX[s].At(i, j)))
			}
		}
		settings := &fd.JacobianSettings{Formula: fd.Central, Step: min(1e-7/size, 0.01*v0)}
		want := mat.NewDense(m.Dim(), 1, nil)
		fd.Jacobian(want, func(dst, v []float64) {
			mp := withParam(t, m, p, v[0])
			if err := mp.Step(mp.NewWorkspace(), dst, xCur, xPrev, anchors); err != nil {
				t.Fatal(err)
			}
		}, []float64{v0}, settings)
		if e := relErr(mat.NewDense(m.Dim(), 1, got), want); e > fdTol {
			t.Errorf("%v %d: one step: relative error %.2g", p.Kind, p.Index, e)
		}
		// The rollout.
		wantRoll := mat.NewDense(steps*m.Dim(), 1, nil)
		fd.Jacobian(wantRoll, func(dst, v []float64) {
			mp := withParam(t, m, p, v[0])
			rp := mp.NewRollout(steps)
			if err := rp.Run(xCur, xPrev, ans); err != nil {
				t.Fatal(err)
			}
			for s := 1; s <= steps; s++ {
				copy(dst[(s-1)*m.Dim():], rp.State(s))
			}
		}, []float64{v0}, settings)
		gotRoll := mat.NewDense(steps*m.Dim(), 1, nil)
		for s := range steps {
			for i := range m.Dim() {
				gotRoll.Set(s*m.Dim()+i, 0, dX[s].At(i, j))
			}
		}
		e := relErr(gotRoll, wantRoll)
		if e > fdTol {
			t.Errorf("%v %d: %d-step rollout: relative error %.2g", p.Kind, p.Index, steps, e)
		}
		t.Logf("%v %d: rollout relative error %.2g", p.Kind, p.Index, e)
	}
	if a := testing.AllocsPerRun(5, func() { r.ParamTangent(dX, testParams) }); a != 0 {
		t.Errorf("ParamTangent: %v allocations per call", a)
	}
	if a := testing.AllocsPerRun(5, func() { ws.ParamSensitivity(xNext, testParams[0]) }); a != 0 {
		t.Errorf("ParamSensitivity: %v allocations per call", a)
	}
}
