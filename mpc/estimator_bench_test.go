package mpc

import (
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"testing"
	"time"

	"gonum.org/v1/gonum/floats"
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
// allocates nothing (testing.AllocsPerRun), on the demo cell (with and
// without Prepare) and on a 60-node net.
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

// propagateWithJacobians is the propagation with G = [A B] formed: the
// block-structured product of the estimator's first version, kept as the
// middle contender of BenchmarkCovariancePropagation. It replaces p by
// F·p·Fᵀ + Q with T = G·p (axpy rows), new P11 = upper triangle of T·Gᵀ
// (dots), new P12 = T[:, :D], new P22 = old P11: 5·D³ multiply-adds.
func propagateWithJacobians(p []float64, d int, a, b []float64, q11 []float64, g, t, s11 []float64) {
	n := 2 * d
	for i := 0; i < d; i++ {
		copy(g[i*n:i*n+d], a[i*d:(i+1)*d])
		copy(g[i*n+d:(i+1)*n], b[i*d:(i+1)*d])
	}
	for i := 0; i < d; i++ {
		ti := t[i*n : (i+1)*n]
		clear(ti)
		for k, gik := range g[i*n : (i+1)*n] {
			if gik != 0 {
				floats.AddScaled(ti, gik, p[k*n:(k+1)*n])
			}
		}
	}
	for i := 0; i < d; i++ {
		for j := i; j < d; j++ {
			s11[i*d+j] = floats.Dot(t[i*n:(i+1)*n], g[j*n:(j+1)*n])
		}
		s11[i*d+i] += q11[i]
	}
	for i := 0; i < d; i++ {
		copy(p[(d+i)*n+d:(d+i+1)*n], p[i*n:i*n+d])
	}
	for i := 0; i < d; i++ {
		copy(p[i*n+d:(i+1)*n], t[i*n:i*n+d])
		for j := 0; j < d; j++ {
			p[(d+j)*n+i] = t[i*n+j]
		}
		for j := i; j < d; j++ {
			p[i*n+j], p[j*n+i] = s11[i*d+j], s11[i*d+j]
		}
	}
}

// randomCovariance returns a random symmetric positive definite n×n
// matrix L·Lᵀ, row-major.
func randomCovariance(rng *rand.Rand, n int) []float64 {
	l := mat.NewDense(n, n, nil)
	for i := 0; i < n; i++ {
		for j := 0; j < n; j++ {
			l.Set(i, j, rng.NormFloat64())
		}
	}
	var p mat.Dense
	p.Mul(l, l.T())
	return slices.Clone(p.RawMatrix().Data)
}

// BenchmarkCovariancePropagation compares three ways to propagate the
// covariance through one step of a sim figure (the demo jellyfish, nets of
// 60 and 150 nodes), D = 3·nodes:
//
//   - tangent: what the estimator does, G applied through the step's band
//     factor (Process.TangentTo), 3·D directions;
//   - jacobians: sim forms A = ∂x⁺/∂x_t and B = ∂x⁺/∂x_{t−1} densely
//     (SensitivityMatrices), then the block product propagateWithJacobians;
//   - dense: the same A and B, then F·P·Fᵀ with the 2D×2D F through gonum's
//     mat (which goes parallel above 64 rows, so its cpu-ns/op counts both
//     cores).
func BenchmarkCovariancePropagation(b *testing.B) {
	for _, sz := range []struct {
		name       string
		rows, cols int
	}{{"demo20", 0, 0}, {"net60", 10, 6}, {"net150", 15, 10}} {
		var proc *FigureProcess
		var joints []float64
		if sz.rows == 0 {
			c := loadDemoCell(b)
			model, err := c.NewModel(c.TickS)
			if err != nil {
				b.Fatal(err)
			}
			if proc, err = NewFigureProcess(model, c.NumJoints(), c.NewWorkspace(nil).AnchorsTo); err != nil {
				b.Fatal(err)
			}
			joints = make([]float64, c.NumJoints())
			c.HomeTo(joints)
		} else {
			var ms MarkerSet
			proc, ms = netFigure(b, sz.rows, sz.cols, 0.01)
			_ = ms
			joints = make([]float64, 3)
		}
		d := proc.Dim()
		n := 2 * d
		x := make([]float64, d)
		if err := proc.RestPoseTo(x, joints); err != nil {
			b.Fatal(err)
		}
		xNext := make([]float64, d)
		if err := proc.Step(xNext, x, x, joints); err != nil {
			b.Fatal(err)
		}
		p0 := randomCovariance(rand.New(rand.NewPCG(9, 9)), n)
		q := make([]float64, d)
		for i := range q {
			q[i] = 1e-8
		}
		est, err := NewEstimator(proc, MarkerSet{TrackerToWorld: sim.Identity()}, EstimatorSettings{})
		if err != nil {
			b.Fatal(err)
		}
		b.Run(sz.name+"/tangent", func(b *testing.B) {
			p := slices.Clone(p0)
			b.ReportAllocs()
			cpu0 := processCPUSeconds()
			for i := 0; i < b.N; i++ {
				copy(p, p0)
				est.propagate(p, q)
			}
			b.ReportMetric(1e9*(processCPUSeconds()-cpu0)/float64(b.N), "cpu-ns/op")
		})
		ws := proc.model.NewWorkspace()
		anchors := make([]float64, 3*proc.model.NumAnchors())
		if proc.anchorsOf != nil {
			proc.anchorsOf(anchors, joints)
		}
		if err := proc.model.Step(ws, xNext, x, x, anchors); err != nil {
			b.Fatal(err)
		}
		dCur, dPrev := mat.NewDense(d, d, nil), mat.NewDense(d, d, nil)
		b.Run(sz.name+"/jacobians", func(b *testing.B) {
			p := slices.Clone(p0)
			g, tt, s11 := make([]float64, d*n), make([]float64, d*n), make([]float64, d*d)
			b.ReportAllocs()
			cpu0 := processCPUSeconds()
			for i := 0; i < b.N; i++ {
				copy(p, p0)
				ws.SensitivityMatrices(dCur, dPrev, nil)
				propagateWithJacobians(p, d, dCur.RawMatrix().Data, dPrev.RawMatrix().Data, q, g, tt, s11)
			}
			b.ReportMetric(1e9*(processCPUSeconds()-cpu0)/float64(b.N), "cpu-ns/op")
		})
		b.Run(sz.name+"/dense", func(b *testing.B) {
			f := mat.NewDense(n, n, nil)
			pm := mat.NewDense(n, n, p0)
			var fp, out mat.Dense
			fp.ReuseAs(n, n)
			out.ReuseAs(n, n)
			b.ReportAllocs()
			cpu0 := processCPUSeconds()
			for i := 0; i < b.N; i++ {
				ws.SensitivityMatrices(dCur, dPrev, nil)
				f.Slice(0, d, 0, d).(*mat.Dense).Copy(dCur)
				f.Slice(0, d, d, n).(*mat.Dense).Copy(dPrev)
				for i := 0; i < d; i++ {
					f.Set(d+i, i, 1)
				}
				fp.Mul(f, pm)
				out.Mul(&fp, f.T())
			}
			b.ReportMetric(1e9*(processCPUSeconds()-cpu0)/float64(b.N), "cpu-ns/op")
		})
	}
}

// TestPropagateMatchesDenseProduct checks the estimator's propagation
// (through TangentTo of an exactly linear process) and the formed-Jacobian
// block product against F·P·Fᵀ + Q formed densely with gonum's mat (the
// reference library), for a random symmetric P: agreement to 1e-12 of the
// largest entry (rounding of sums of 2D = 24 terms). Also with two markers
// and their offsets in the state, where F = blkdiag(F_x, I) and Q has the
// offsets' random-walk variance on their diagonal (the formed-Jacobian
// product has no offsets and is left out there).
func TestPropagateMatchesDenseProduct(t *testing.T) {
	for _, markers := range [][]int{nil, {1, 3}} {
		rng := rand.New(rand.NewPCG(11, 11))
		proc := newLinearProcess(rng, 4, 2, 0.01)
		d := proc.Dim()
		no := 3 * len(markers)
		n := 2*d + no
		q := make([]float64, d+no)
		for i := range q {
			if i >= d || !proc.Fixed(i) {
				q[i] = rng.Float64()
			}
		}
		p0 := randomCovariance(rng, n)
		f := mat.NewDense(n, n, nil)
		f.Slice(0, d, 0, d).(*mat.Dense).Copy(proc.a)
		f.Slice(0, d, d, 2*d).(*mat.Dense).Copy(proc.b)
		for i := 0; i < d; i++ {
			f.Set(d+i, i, 1)
		}
		for i := 2 * d; i < n; i++ {
			f.Set(i, i, 1)
		}
		var fp, want mat.Dense
		fp.Mul(f, mat.NewDense(n, n, slices.Clone(p0)))
		want.Mul(&fp, f.T())
		for i := 0; i < d; i++ {
			want.Set(i, i, want.At(i, i)+q[i])
		}
		for i := 2 * d; i < n; i++ {
			want.Set(i, i, want.At(i, i)+q[i-d])
		}
		est, err := NewEstimator(proc, MarkerSet{Nodes: markers, TrackerToWorld: sim.Identity()}, EstimatorSettings{})
		if err != nil {
			t.Fatal(err)
		}
		xs := make([]float64, d)
		if err := proc.Step(xs, xs, xs, make([]float64, 2)); err != nil {
			t.Fatal(err)
		}
		results := map[string][]float64{}
		viaTangent := slices.Clone(p0)
		est.propagate(viaTangent, q)
		results["tangent"] = viaTangent
		if no == 0 {
			viaJacobians := slices.Clone(p0)
			propagateWithJacobians(viaJacobians, d, proc.a.RawMatrix().Data, proc.b.RawMatrix().Data, q,
				make([]float64, d*n), make([]float64, d*n), make([]float64, d*d))
			results["jacobians"] = viaJacobians
		}
		scale := mat.Norm(&want, math.Inf(1))
		for name, got := range results {
			for i := 0; i < n; i++ {
				for j := 0; j < n; j++ {
					if e := math.Abs(got[i*n+j] - want.At(i, j)); e > 1e-12*scale {
						t.Fatalf("%d markers, %s: P[%d,%d] = %g, dense %g", len(markers), name, i, j, got[i*n+j], want.At(i, j))
					}
				}
			}
		}
	}
}
