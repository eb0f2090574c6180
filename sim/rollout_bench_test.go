package sim

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// benchFigure is an invented ladder-like figure of n nodes (n even): two
// rails 0.1 m apart, 3 cm between rungs, with rungs and one diagonal per
// bay, listed in a shuffled order (fixed seed) so the band order has to
// be found. Six strings hang it: the top pair, a pair at a third of its
// height and a pair at two thirds, 0.3 m above, pulled 5 mm taut.
func benchFigure(tb testing.TB, n int, h float64) (*Model, []float64) {
	tb.Helper()
	rails := n / 2
	rng := rand.New(rand.NewPCG(uint64(n), 17))
	perm := rng.Perm(n)
	fig := &Figure{Nodes: make([]Node, n)}
	id := func(side, i int) int { return perm[2*i+side] }
	for i := range rails {
		for side := range 2 {
			fig.Nodes[id(side, i)] = Node{
				Name:       fmt.Sprintf("rail%d_%d", side, i),
				MassKg:     0.02,
				PositionM:  [3]float64{-0.05 + 0.1*float64(side), 0, 1.5 - 0.03*float64(i)},
				DragNsPerM: 0.002,
			}
		}
	}
	rod := func(a, b int) {
		pa, pb := fig.Nodes[a].PositionM, fig.Nodes[b].PositionM
		l := math.Sqrt((pa[0]-pb[0])*(pa[0]-pb[0]) + (pa[1]-pb[1])*(pa[1]-pb[1]) + (pa[2]-pb[2])*(pa[2]-pb[2]))
		fig.Rods = append(fig.Rods, Rod{A: a, B: b, RestLengthM: l, StiffnessNPerM: 2000, DampingNsPerM: 0.05})
	}
	for i := range rails {
		rod(id(0, i), id(1, i))
		if i+1 < rails {
			rod(id(0, i), id(0, i+1))
			rod(id(1, i), id(1, i+1))
			rod(id(0, i), id(1, i+1))
		}
	}
	var strs []StringLink
	var anchors []float64
	for _, i := range []int{0, rails / 3, 2 * rails / 3} {
		for side := range 2 {
			node := id(side, i)
			strs = append(strs, StringLink{Node: node, RestLengthM: 0.295, StiffnessNPerM: 500})
			p := fig.Nodes[node].PositionM
			anchors = append(anchors, p[0], p[1], p[2]+0.3)
		}
	}
	m, err := NewModel(fig, strs, ModelSettings{StepS: h})
	if err != nil {
		tb.Fatal(err)
	}
	return m, anchors
}

// benchMotion returns a moving state near the rest pose (fixed seed).
func benchMotion(tb testing.TB, m *Model, anchors []float64) (xCur, xPrev []float64) {
	rest := make([]float64, m.Dim())
	if err := m.RestPose(m.NewWorkspace(), rest, anchors); err != nil {
		tb.Fatal(err)
	}
	return randomMotion(m, rest, rand.New(rand.NewPCG(18, 19)), 0.002, 0.05)
}

// benchAnchors moves every anchor along a smooth invented path: ±1 cm
// sideways over the horizon.
func benchAnchors(anchors []float64, steps int) []float64 {
	out := make([]float64, steps*len(anchors))
	for k := range steps {
		for j := range anchors {
			out[k*len(anchors)+j] = anchors[j]
			if j%3 == 0 {
				out[k*len(anchors)+j] += 0.01 * math.Sin(float64(k+1)/float64(steps)*math.Pi)
			}
		}
	}
	return out
}

var benchSizes = []int{20, 60, 150}

func BenchmarkStep(b *testing.B) {
	for _, n := range benchSizes {
		b.Run(fmt.Sprintf("nodes=%d", n), func(b *testing.B) {
			m, anchors := benchFigure(b, n, 0.01)
			xCur, xPrev := benchMotion(b, m, anchors)
			ws := m.NewWorkspace()
			xNext := make([]float64, m.Dim())
			b.ReportAllocs()
			cpu0 := benchCPUSeconds()
			for b.Loop() {
				if err := m.Step(ws, xNext, xCur, xPrev, anchors); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(1e9*(benchCPUSeconds()-cpu0)/float64(b.N), "cpu-ns/op")
			b.ReportMetric(float64(ws.NewtonIters()), "newton/step")
			b.ReportMetric(float64(m.HalfBandwidth()), "halfband")
		})
	}
}

// BenchmarkStepProjectedOnly is Step with the projected Hessian for every
// Newton direction (the design's baseline), to compare with the default
// (exact Hessian when positive definite). Where rods are compressed the
// projection changes the Hessian, Newton's convergence becomes linear and
// the default iteration budget is not enough at 150 nodes.
func BenchmarkStepProjectedOnly(b *testing.B) {
	for _, n := range benchSizes {
		b.Run(fmt.Sprintf("nodes=%d", n), func(b *testing.B) {
			m, anchors := benchFigure(b, n, 0.01)
			m.firstHess = hessProjected
			m.maxIters = 1000 // projected-only Newton converges only linearly
			xCur, xPrev := benchMotion(b, m, anchors)
			ws := m.NewWorkspace()
			xNext := make([]float64, m.Dim())
			b.ReportAllocs()
			cpu0 := benchCPUSeconds()
			for b.Loop() {
				if err := m.Step(ws, xNext, xCur, xPrev, anchors); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(1e9*(benchCPUSeconds()-cpu0)/float64(b.N), "cpu-ns/op")
			b.ReportMetric(float64(ws.NewtonIters()), "newton/step")
		})
	}
}

func BenchmarkStepSensitivityMatrices(b *testing.B) {
	for _, n := range benchSizes {
		b.Run(fmt.Sprintf("nodes=%d", n), func(b *testing.B) {
			m, anchors := benchFigure(b, n, 0.01)
			xCur, xPrev := benchMotion(b, m, anchors)
			ws := m.NewWorkspace()
			xNext := make([]float64, m.Dim())
			dCur, dPrev := mat.NewDense(m.Dim(), m.Dim(), nil), mat.NewDense(m.Dim(), m.Dim(), nil)
			dAn := mat.NewDense(m.Dim(), 3*m.NumAnchors(), nil)
			b.ReportAllocs()
			cpu0 := benchCPUSeconds()
			for b.Loop() {
				if err := m.Step(ws, xNext, xCur, xPrev, anchors); err != nil {
					b.Fatal(err)
				}
				ws.SensitivityMatrices(dCur, dPrev, dAn)
			}
			b.ReportMetric(1e9*(benchCPUSeconds()-cpu0)/float64(b.N), "cpu-ns/op")
		})
	}
}

// BenchmarkRollout20Tangent24 is the planner's pattern: a 20-step rollout
// and forward sensitivities in 24 directions of the anchors.
func BenchmarkRollout20Tangent24(b *testing.B) {
	const steps, k = 20, 24
	for _, n := range benchSizes {
		b.Run(fmt.Sprintf("nodes=%d", n), func(b *testing.B) {
			m, anchors := benchFigure(b, n, 0.025)
			xCur, xPrev := benchMotion(b, m, anchors)
			ans := benchAnchors(anchors, steps)
			r := m.NewRollout(steps)
			dX := make([]*mat.Dense, steps)
			dA := make([]*mat.Dense, steps)
			na := 3 * m.NumAnchors()
			rng := rand.New(rand.NewPCG(20, 21))
			for s := range steps {
				dX[s] = mat.NewDense(m.Dim(), k, nil)
				dA[s] = mat.NewDense(na, k, nil)
				for i := range na {
					for j := range k {
						dA[s].Set(i, j, rng.NormFloat64())
					}
				}
			}
			b.ReportAllocs()
			cpu0 := benchCPUSeconds()
			for b.Loop() {
				if err := r.Run(xCur, xPrev, ans); err != nil {
					b.Fatal(err)
				}
				r.Tangent(dX, nil, nil, dA)
			}
			b.ReportMetric(1e9*(benchCPUSeconds()-cpu0)/float64(b.N), "cpu-ns/op")
		})
	}
}

// BenchmarkRollout20 is the rollout alone, to split the cost above.
func BenchmarkRollout20(b *testing.B) {
	const steps = 20
	for _, n := range benchSizes {
		b.Run(fmt.Sprintf("nodes=%d", n), func(b *testing.B) {
			m, anchors := benchFigure(b, n, 0.025)
			xCur, xPrev := benchMotion(b, m, anchors)
			ans := benchAnchors(anchors, steps)
			r := m.NewRollout(steps)
			b.ReportAllocs()
			cpu0 := benchCPUSeconds()
			for b.Loop() {
				if err := r.Run(xCur, xPrev, ans); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(1e9*(benchCPUSeconds()-cpu0)/float64(b.N), "cpu-ns/op")
		})
	}
}

// BenchmarkRollout20Warm is RunWarm alternating between two anchor paths
// 0.1 mm apart, as a planner's later Gauss–Newton iterations would.
func BenchmarkRollout20Warm(b *testing.B) {
	const steps = 20
	for _, n := range benchSizes {
		b.Run(fmt.Sprintf("nodes=%d", n), func(b *testing.B) {
			m, anchors := benchFigure(b, n, 0.025)
			xCur, xPrev := benchMotion(b, m, anchors)
			ans := benchAnchors(anchors, steps)
			ans2 := append([]float64(nil), ans...)
			for i := range ans2 {
				ans2[i] += 1e-4 * float64(i%3-1)
			}
			r := m.NewRollout(steps)
			if err := r.Run(xCur, xPrev, ans); err != nil {
				b.Fatal(err)
			}
			b.ReportAllocs()
			cpu0 := benchCPUSeconds()
			iters, i := 0, 0
			for b.Loop() {
				a := ans
				if i%2 == 1 {
					a = ans2
				}
				i++
				if err := r.RunWarm(xCur, xPrev, a); err != nil {
					b.Fatal(err)
				}
				iters += r.NewtonIters()
			}
			b.ReportMetric(1e9*(benchCPUSeconds()-cpu0)/float64(b.N), "cpu-ns/op")
			b.ReportMetric(float64(iters)/float64(b.N), "newton/run")
		})
	}
}
