package sim

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/diff/fd"
	"gonum.org/v1/gonum/mat"
)

// Multi-step sensitivities from Rollout.Tangent against central
// differences (gonum diff/fd) of whole rollouts: d(all states)/d(anchors
// over the horizon), d(all states)/d(x0) and d(all states)/d(x_{−1}).
func TestRolloutTangentAgainstFiniteDifferences(t *testing.T) {
	m, anchors := puppetModel(t, ModelSettings{GradTol: 1e-15})
	t.Run("free", func(t *testing.T) { checkRolloutTangent(t, m, anchors) })
	// The same puppet with its left foot pinned and its left hand's
	// string tied to that foot: anchored rows, columns and strings.
	fig := m.Figure()
	fig.Nodes[fig.NodeIndex("l_foot")].Anchored = true
	strs := m.Strings()
	strs[1].Node = fig.NodeIndex("l_foot")
	pinned, err := NewModel(fig, strs, ModelSettings{StepS: m.StepS(), GradTol: 1e-15})
	if err != nil {
		t.Fatal(err)
	}
	t.Run("pinned", func(t *testing.T) { checkRolloutTangent(t, pinned, anchors) })
}

func checkRolloutTangent(t *testing.T, m *Model, anchors []float64) {
	const steps = 6
	n, na := m.Dim(), 3*m.NumAnchors()
	rest := make([]float64, n)
	if err := m.RestPose(m.NewWorkspace(), rest, anchors); err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(5, 6))
	x0, xm1 := randomMotion(m, rest, rng, 0.003, 0.1)
	an := make([]float64, steps*na)
	for k := range steps {
		for j := range na {
			// A smooth invented bar motion: up to 2 cm over the horizon.
			an[k*na+j] = anchors[j] + 0.002*float64(k+1)/steps*(2*rng.Float64()-1)
		}
	}
	r := m.NewRollout(steps)
	if err := r.Run(x0, xm1, an); err != nil {
		t.Fatal(err)
	}
	// Well-conditioned: every string stays clear of its tension ramp,
	// where the third derivative of the string law is of order k/w and
	// central differences lose accuracy (larger motions that cross the
	// ramp were seen to give FD errors near 1e-5 for that reason).
	for k := 1; k <= steps; k++ {
		for s := range m.NumAnchors() {
			if e := stringStretch(m, s, r.State(k), an[(k-1)*na:k*na]); math.Abs(e) < m.slackW {
				t.Fatalf("step %d string %d: stretch %.3g m is in or near its ramp; choose another state", k, s, e)
			}
		}
	}
	flatStates := func(r *Rollout, dst []float64) {
		for k := 1; k <= steps; k++ {
			copy(dst[(k-1)*n:k*n], r.State(k))
		}
	}
	fdRoll := m.NewRollout(steps)
	jacobian := func(which string, at []float64) *mat.Dense {
		want := mat.NewDense(steps*n, len(at), nil)
		fd.Jacobian(want, func(dst, v []float64) {
			a, b, c := x0, xm1, an
			switch which {
			case "x0":
				a = v
			case "xm1":
				b = v
			case "anchors":
				c = v
			}
			if err := fdRoll.Run(a, b, c); err != nil {
				t.Fatal(err)
			}
			flatStates(fdRoll, dst)
		}, at, fdSettings())
		return want
	}
	dX := make([]*mat.Dense, steps)
	stack := func(k int) *mat.Dense {
		got := mat.NewDense(steps*n, k, nil)
		for s := range steps {
			got.Slice(s*n, (s+1)*n, 0, k).(*mat.Dense).Copy(dX[s])
		}
		return got
	}
	// Directions: the identity over each input, so Tangent gives the full
	// Jacobian column by column.
	for _, which := range []string{"x0", "xm1", "anchors"} {
		var k int
		var dX0, dXm1 *mat.Dense
		var dA []*mat.Dense
		switch which {
		case "x0", "xm1":
			k = n
			id := mat.NewDense(n, n, nil)
			for i := range n {
				id.Set(i, i, 1)
			}
			if which == "x0" {
				dX0 = id
			} else {
				dXm1 = id
			}
		case "anchors":
			k = steps * na
			dA = make([]*mat.Dense, steps)
			for s := range steps {
				dA[s] = mat.NewDense(na, k, nil)
				for j := range na {
					dA[s].Set(j, s*na+j, 1)
				}
			}
		}
		for s := range steps {
			dX[s] = mat.NewDense(n, k, nil)
		}
		r.Tangent(dX, dX0, dXm1, dA)
		got := stack(k)
		at := map[string][]float64{"x0": x0, "xm1": xm1, "anchors": an}[which]
		e := relErr(got, jacobian(which, at))
		if e > fdTol {
			t.Errorf("d(states)/d(%s): relative error %.2g", which, e)
		}
		t.Logf("d(states)/d(%s) over %d steps: relative error %.2g", which, steps, e)
	}
}

// stringStretch is |x_node − anchor| − rest length of string s.
func stringStretch(m *Model, s int, x, anchors []float64) float64 {
	st := m.strs[s]
	var d2 float64
	for c := range 3 {
		v := x[3*st.Node+c] - anchors[3*s+c]
		d2 += v * v
	}
	return math.Sqrt(d2) - st.RestLengthM
}

// RunWarm gives the same states as Run to within the step tolerance, with
// fewer Newton iterations after a small change of the anchors, and
// allocates nothing.
func TestRolloutRunWarm(t *testing.T) {
	const steps = 20
	m, anchors := benchFigure(t, 20, 0.025)
	xCur, xPrev := benchMotion(t, m, anchors)
	ans := benchAnchors(anchors, steps)
	cold, warm := m.NewRollout(steps), m.NewRollout(steps)
	if err := warm.RunWarm(xCur, xPrev, ans); err != nil { // no previous run: cold
		t.Fatal(err)
	}
	for i := range ans {
		ans[i] += 1e-4 * float64(i%3-1) // a small planner-like change
	}
	if err := cold.Run(xCur, xPrev, ans); err != nil {
		t.Fatal(err)
	}
	if err := warm.RunWarm(xCur, xPrev, ans); err != nil {
		t.Fatal(err)
	}
	for k := 1; k <= steps; k++ {
		for i, v := range warm.State(k) {
			// Each run converged to 1e-10 m of mass-scaled residual; the
			// states agree far better than 1e-8 m.
			if math.Abs(v-cold.State(k)[i]) > 1e-8 {
				t.Fatalf("state %d [%d]: warm %.12g cold %.12g", k, i, v, cold.State(k)[i])
			}
		}
	}
	if warm.NewtonIters() >= cold.NewtonIters() {
		t.Errorf("warm start took %d Newton iterations, cold %d", warm.NewtonIters(), cold.NewtonIters())
	}
	t.Logf("Newton iterations over %d steps: cold %d, warm %d", steps, cold.NewtonIters(), warm.NewtonIters())
	if a := testing.AllocsPerRun(5, func() {
		if err := warm.RunWarm(xCur, xPrev, ans); err != nil {
			t.Fatal(err)
		}
	}); a != 0 {
		t.Errorf("RunWarm: %v allocations per call", a)
	}
}
