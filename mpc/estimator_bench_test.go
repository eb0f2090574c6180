package mpc

import (
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"

	"tautline/sim"
)

// netFigure builds an invented hanging net of rows × cols nodes (5 cm
// apart, in the x–z plane) with horizontal, vertical and one diagonal rod
// per cell, hung by four strings from its top row. Its three joints shift
// every anchor along x, y and z. A marker sits on every other node.
func netFigure(tb testing.TB, rows, cols int, h float64) (*FigureProcess, MarkerSet) {
	tb.Helper()
	fig := &sim.Figure{}
	id := func(r, c int) int { return r*cols + c }
	for r := 0; r < rows; r++ {
		for c := 0; c < cols; c++ {
			fig.Nodes = append(fig.Nodes, sim.Node{
				Name:       fmt.Sprintf("n%d_%d", r, c),
				MassKg:     0.05,
				PositionM:  [3]float64{0.05 * float64(c), 0, 1.5 - 0.05*float64(r)},
				DragNsPerM: 0.02,
			})
		}
	}
	rod := func(a, b int) {
		pa, pb := fig.Nodes[a].PositionM, fig.Nodes[b].PositionM
		l := math.Hypot(math.Hypot(pa[0]-pb[0], pa[1]-pb[1]), pa[2]-pb[2])
		fig.Rods = append(fig.Rods, sim.Rod{A: a, B: b, RestLengthM: l, StiffnessNPerM: 2000, DampingNsPerM: 2})
	}
	for r := 0; r < rows; r++ {
		for c := 0; c < cols; c++ {
			if c+1 < cols {
				rod(id(r, c), id(r, c+1))
			}
			if r+1 < rows {
				rod(id(r, c), id(r+1, c))
				if c+1 < cols {
					rod(id(r, c), id(r+1, c+1))
				}
			}
		}
	}
	var strs []sim.StringLink
	var base []float64
	for _, c := range []int{0, cols / 3, 2 * cols / 3, cols - 1} {
		p := fig.Nodes[id(0, c)].PositionM
		base = append(base, p[0], p[1]+0.05, p[2]+0.3)
		strs = append(strs, sim.StringLink{Node: id(0, c), RestLengthM: 0.3, StiffnessNPerM: 3000})
	}
	model, err := sim.NewModel(fig, strs, sim.ModelSettings{StepS: h})
	if err != nil {
		tb.Fatal(err)
	}
	proc, err := NewFigureProcess(model, 3, func(dst, q []float64) {
		for i := range dst {
			dst[i] = base[i] + q[i%3]
		}
	})
	if err != nil {
		tb.Fatal(err)
	}
	ms := MarkerSet{NoiseM: 1e-3, TrackerToWorld: sim.Identity()}
	for i := 0; i < len(fig.Nodes); i += 2 {
		ms.Nodes = append(ms.Nodes, i)
	}
	return proc, ms
}

// tickFixture is a recorded run of a process for benchmarks: the real
// states and joints per tick and noisy, 20 %-occluded observations.
type tickFixture struct {
	est    *Estimator
	joints [][]float64
	states [][]float64 // the real positions per tick
	obs    [][]MarkerObs
	h      float64

	withPrepare bool // tick calls Prepare for the next frame
}

func newTickFixture(tb testing.TB, proc Process, ms MarkerSet, joint func(dst []float64, tS float64), ticks int) *tickFixture {
	tb.Helper()
	rng := rand.New(rand.NewPCG(3, 3))
	d, nj, h := proc.Dim(), proc.NumJoints(), proc.StepS()
	f := &tickFixture{h: h}
	cur, prev, next := make([]float64, d), make([]float64, d), make([]float64, d)
	q := make([]float64, nj)
	joint(q, 0)
	if err := proc.RestPoseTo(cur, q); err != nil {
		tb.Fatal(err)
	}
	copy(prev, cur)
	fromWorld := ms.TrackerToWorld.Inverse()
	for k := 0; k < ticks+4; k++ {
		if k > 0 {
			joint(q, float64(k)*h)
			if err := proc.Step(next, cur, prev, q); err != nil {
				tb.Fatal(err)
			}
			prev, cur, next = cur, next, prev
		}
		var obs []MarkerObs
		for m, node := range ms.Nodes {
			if rng.Float64() < 0.2 {
				continue
			}
			var p [3]float64
			for a := range 3 {
				p[a] = cur[3*node+a] + ms.NoiseM*rng.NormFloat64()
			}
			obs = append(obs, MarkerObs{Marker: m, PosTrackerM: fromWorld.Apply(p)})
		}
		f.joints = append(f.joints, slices.Clone(q))
		f.states = append(f.states, slices.Clone(cur))
		f.obs = append(f.obs, obs)
	}
	est, err := NewEstimator(proc, ms, EstimatorSettings{})
	if err != nil {
		tb.Fatal(err)
	}
	f.est = est
	return f
}

// tick runs one server tick k ≥ 1 of the fixture: observe frame k, record
// the command for k+3 and predict to it (a 20 ms frame delay plus one tick
// at 10 ms) — the feedback phase — and then, if prepare is set, Prepare
// for frame k+1.
func (f *tickFixture) tick(k int, rep *EstimatorReport, xCur, xPrev []float64) error {
	if err := f.feedback(k, rep, xCur, xPrev); err != nil {
		return err
	}
	return f.prepare(k)
}

func (f *tickFixture) feedback(k int, rep *EstimatorReport, xCur, xPrev []float64) error {
	if err := f.est.Observe(float64(k)*f.h, f.joints[k], f.obs[k], rep); err != nil {
		return err
	}
	if err := f.est.RecordCommand(float64(k+3)*f.h, f.joints[k+3]); err != nil {
		return err
	}
	return f.est.PredictTo(xCur, xPrev, float64(k+3)*f.h)
}

func (f *tickFixture) prepare(k int) error {
	if !f.withPrepare {
		return nil
	}
	return f.est.Prepare(float64(k+1) * f.h)
}

func demoFixture(tb testing.TB, ticks int) *tickFixture {
	c := loadDemoCell(tb)
	model, err := c.NewModel(c.TickS)
	if err != nil {
		tb.Fatal(err)
	}
	proc, err := NewFigureProcess(model, c.NumJoints(), c.NewWorkspace(nil).AnchorsTo)
	if err != nil {
		tb.Fatal(err)
	}
	ms := MarkerSet{Nodes: demoMarkerNodes(c), NoiseM: c.MarkerNoiseM, TrackerToWorld: c.TrackerToWorld}
	return newTickFixture(tb, proc, ms, func(dst []float64, tS float64) { demoJointsTo(c, dst, tS) }, ticks)
}

func netJoints(dst []float64, tS float64) {
	for j := range dst {
		dst[j] = 0.03 * math.Sin(2*math.Pi*0.8*tS+float64(j))
	}
}

// TestEstimatorTickAllocatesNothing: after the first ticks, a whole
// estimator tick (observe, record the command, predict to the apply time)
// allocates nothing (testing.AllocsPerRun), on the demo cell and on a
// 60-node net, whose 180×180 matrices are where gonum's matrix product
// would go parallel and allocate.
func TestEstimatorTickAllocatesNothing(t *testing.T) {
	for _, name := range []string{"demo", "demo+prepare", "net60"} {
		var f *tickFixture
		if name != "net60" {
			f = demoFixture(t, 30)
			f.withPrepare = name == "demo+prepare"
		} else {
			proc, ms := netFigure(t, 10, 6, 0.01)
			f = newTickFixture(t, proc, ms, netJoints, 30)
		}
		var rep EstimatorReport
		d := f.est.Dim()
		xCur, xPrev := make([]float64, d), make([]float64, d)
		for k := 0; k < 3; k++ {
			if err := f.tick(k, &rep, xCur, xPrev); err != nil {
				t.Fatal(err)
			}
		}
		k := 3
		allocs := testing.AllocsPerRun(20, func() {
			if err := f.tick(k, &rep, xCur, xPrev); err != nil {
				t.Fatal(err)
			}
			k++
		})
		if allocs != 0 {
			t.Errorf("%s: %g allocations per tick", name, allocs)
		}
	}
}

// BenchmarkEstimatorTick measures one estimator tick for the demo cell (20
// nodes, 10 markers) and invented nets of 60 and 150 nodes (markers on
// every other node), each frame with 20 % of the markers hidden:
//
//   - plain: Observe (one step with its covariance propagation, gate,
//     update), RecordCommand, PredictTo 30 ms ahead;
//   - prepared: the same with Prepare for the next frame after it, so the
//     covariance propagation leaves the feedback phase.
//
// ns/op is the whole tick; feedback-ns/op the part from Observe to the
// predicted state (what delays a command); cpu-ns/op and
// feedback-cpu-ns/op the process's CPU time for the same, which excludes
// waiting for a core on a loaded machine (cpu-ns/op includes re-recording
// when b.N exceeds the 400 recorded ticks).
func BenchmarkEstimatorTick(b *testing.B) {
	for _, sz := range []struct {
		name       string
		rows, cols int
	}{{"demo20", 0, 0}, {"net60", 10, 6}, {"net150", 15, 10}} {
		for _, mode := range []string{"plain", "prepared"} {
			b.Run(sz.name+"/"+mode, func(b *testing.B) {
				n := min(b.N, 400)
				var f *tickFixture
				if sz.rows == 0 {
					f = demoFixture(b, n+1)
				} else {
					proc, ms := netFigure(b, sz.rows, sz.cols, 0.01)
					f = newTickFixture(b, proc, ms, netJoints, n+1)
				}
				f.withPrepare = mode == "prepared"
				var rep EstimatorReport
				d := f.est.Dim()
				xCur, xPrev := make([]float64, d), make([]float64, d)
				if err := f.tick(0, &rep, xCur, xPrev); err != nil {
					b.Fatal(err)
				}
				b.ReportAllocs()
				b.ResetTimer()
				cpu0 := processCPUSeconds()
				var feedback time.Duration
				var feedbackCPU float64
				k := 1
				for i := 0; i < b.N; i++ {
					if k > n {
						// Past the recorded run: start the recording again.
						b.StopTimer()
						f.est.Reset()
						if err := f.tick(0, &rep, xCur, xPrev); err != nil {
							b.Fatal(err)
						}
						k = 1
						b.StartTimer()
					}
					start, startCPU := time.Now(), processCPUSeconds()
					if err := f.feedback(k, &rep, xCur, xPrev); err != nil {
						b.Fatal(err)
					}
					feedback += time.Since(start)
					feedbackCPU += processCPUSeconds() - startCPU
					if err := f.prepare(k); err != nil {
						b.Fatal(err)
					}
					k++
				}
				b.ReportMetric(float64(feedback.Nanoseconds())/float64(b.N), "feedback-ns/op")
				b.ReportMetric(1e9*(processCPUSeconds()-cpu0)/float64(b.N), "cpu-ns/op")
				b.ReportMetric(1e9*feedbackCPU/float64(b.N), "feedback-cpu-ns/op")
			})
		}
	}
}

// BenchmarkCovariancePropagation compares the block propagation used by
// the filter (F·P·Fᵀ with F = [[A, B], [I, 0]] never formed) with the
// plain dense product of the 2D×2D F through gonum's mat (which goes
// parallel above 64 rows, so its cpu-ns/op counts both cores), for
// D = 3·nodes.
func BenchmarkCovariancePropagation(b *testing.B) {
	for _, nodes := range []int{20, 60, 150} {
		d := 3 * nodes
		n := 2 * d
		rng := rand.New(rand.NewPCG(9, 9))
		a, bb := make([]float64, d*d), make([]float64, d*d)
		for i := range a {
			a[i], bb[i] = rng.NormFloat64()/float64(d), rng.NormFloat64()/float64(d)
		}
		l := mat.NewDense(n, n, nil)
		for i := 0; i < n; i++ {
			for j := 0; j < n; j++ {
				l.Set(i, j, rng.NormFloat64())
			}
		}
		var p0 mat.Dense
		p0.Mul(l, l.T())
		q := make([]float64, d)
		for i := range q {
			q[i] = 1e-8
		}
		b.Run(fmt.Sprintf("block/%d", nodes), func(b *testing.B) {
			p := slices.Clone(p0.RawMatrix().Data)
			g, tt, s11 := make([]float64, d*n), make([]float64, d*n), make([]float64, d*d)
			b.ReportAllocs()
			cpu0 := processCPUSeconds()
			for i := 0; i < b.N; i++ {
				copy(p, p0.RawMatrix().Data)
				propagateCovariance(p, d, a, bb, q, g, tt, s11)
			}
			b.ReportMetric(1e9*(processCPUSeconds()-cpu0)/float64(b.N), "cpu-ns/op")
		})
		b.Run(fmt.Sprintf("dense/%d", nodes), func(b *testing.B) {
			f := mat.NewDense(n, n, nil)
			f.Slice(0, d, 0, d).(*mat.Dense).Copy(mat.NewDense(d, d, a))
			f.Slice(0, d, d, n).(*mat.Dense).Copy(mat.NewDense(d, d, bb))
			for i := 0; i < d; i++ {
				f.Set(d+i, i, 1)
			}
			var fp, out mat.Dense
			fp.ReuseAs(n, n)
			out.ReuseAs(n, n)
			b.ReportAllocs()
			cpu0 := processCPUSeconds()
			for i := 0; i < b.N; i++ {
				fp.Mul(f, &p0)
				out.Mul(&fp, f.T())
			}
			b.ReportMetric(1e9*(processCPUSeconds()-cpu0)/float64(b.N), "cpu-ns/op")
		})
	}
}

// TestPropagateCovarianceMatchesDenseProduct checks the block propagation
// against F·P·Fᵀ + Q formed densely with gonum's mat (the reference
// library), for a random symmetric P: agreement to 1e-12 relative
// (rounding of sums of 2D = 60 terms of order one).
func TestPropagateCovarianceMatchesDenseProduct(t *testing.T) {
	const d = 30
	n := 2 * d
	rng := rand.New(rand.NewPCG(11, 11))
	a, bb, q := make([]float64, d*d), make([]float64, d*d), make([]float64, d)
	for i := range a {
		a[i], bb[i] = rng.NormFloat64(), rng.NormFloat64()
	}
	for i := range q {
		q[i] = rng.Float64()
	}
	l := mat.NewDense(n, n, nil)
	for i := 0; i < n; i++ {
		for j := 0; j < n; j++ {
			l.Set(i, j, rng.NormFloat64())
		}
	}
	var p mat.Dense
	p.Mul(l, l.T())
	f := mat.NewDense(n, n, nil)
	f.Slice(0, d, 0, d).(*mat.Dense).Copy(mat.NewDense(d, d, a))
	f.Slice(0, d, d, n).(*mat.Dense).Copy(mat.NewDense(d, d, bb))
	for i := 0; i < d; i++ {
		f.Set(d+i, i, 1)
	}
	var fp, want mat.Dense
	fp.Mul(f, &p)
	want.Mul(&fp, f.T())
	for i := 0; i < d; i++ {
		want.Set(i, i, want.At(i, i)+q[i])
	}
	got := slices.Clone(p.RawMatrix().Data)
	propagateCovariance(got, d, a, bb, q, make([]float64, d*n), make([]float64, d*n), make([]float64, d*d))
	scale := mat.Norm(&want, math.Inf(1))
	for i := 0; i < n; i++ {
		for j := 0; j < n; j++ {
			if e := math.Abs(got[i*n+j] - want.At(i, j)); e > 1e-12*scale {
				t.Fatalf("P[%d,%d] = %g, dense %g", i, j, got[i*n+j], want.At(i, j))
			}
		}
	}
}
