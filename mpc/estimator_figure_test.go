package mpc

import (
	"math"
	"math/rand/v2"
	"os"
	"testing"

	"gonum.org/v1/gonum/mat"

	"tautline/sim"
)

const demoCellPath = "../testdata/demo/cell.json"

func loadDemoCell(t testing.TB) *sim.Cell {
	t.Helper()
	c, err := sim.LoadCell(demoCellPath, os.ReadFile)
	if err != nil {
		t.Fatal(err)
	}
	return c
}

// demoJointsTo writes an invented joint motion for the demo cell: every
// joint swings about home by up to 0.1 rad at 0.6–0.9 Hz.
func demoJointsTo(c *sim.Cell, dst []float64, tS float64) {
	c.HomeTo(dst)
	for j := range dst {
		f := 0.6 + 0.05*float64(j%7)
		dst[j] += 0.1 * math.Sin(2*math.Pi*f*tS+0.7*float64(j))
	}
}

// truthFigure runs the "real" figure: the cell's figure with every mass
// scaled by a random factor in [1−massJitter, 1+massJitter] (the mismatch
// the filter's process noise must absorb), stepped at the cell's tick.
type truthFigure struct {
	ws               *sim.CellWorkspace
	cur, prev, next  []float64
	tS               float64
	h                float64
	q                []float64
	cell             *sim.Cell
	velocityScratchM []float64
}

func newTruthFigure(t testing.TB, c *sim.Cell, massJitter float64, rng *rand.Rand, t0 float64) *truthFigure {
	t.Helper()
	fig := c.Figure.Clone()
	for i := range fig.Nodes {
		fig.Nodes[i].MassKg *= 1 + massJitter*(2*rng.Float64()-1)
	}
	m, err := sim.NewModel(fig, c.StringLinks(), sim.ModelSettings{StepS: c.TickS})
	if err != nil {
		t.Fatal(err)
	}
	tf := &truthFigure{ws: c.NewWorkspace(m), h: c.TickS, tS: t0, cell: c,
		cur: make([]float64, m.Dim()), prev: make([]float64, m.Dim()), next: make([]float64, m.Dim()),
		q: make([]float64, c.NumJoints())}
	demoJointsTo(c, tf.q, t0)
	anchors := make([]float64, 3*c.NumAnchors())
	tf.ws.AnchorsTo(anchors, tf.q)
	if err := m.RestPose(m.NewWorkspace(), tf.cur, anchors); err != nil {
		t.Fatal(err)
	}
	copy(tf.prev, tf.cur)
	return tf
}

func (tf *truthFigure) step(t testing.TB) {
	tf.tS += tf.h
	demoJointsTo(tf.cell, tf.q, tf.tS)
	if err := tf.ws.Step(tf.next, tf.cur, tf.prev, tf.q); err != nil {
		t.Fatal(err)
	}
	tf.prev, tf.cur, tf.next = tf.cur, tf.next, tf.prev
}

// observe returns the markers of the truth's current pose in the tracker
// frame with noise σ, each hidden with probability occlude.
func (tf *truthFigure) observe(dst []MarkerObs, nodes []int, trackerToWorld sim.Pose, noiseM, occlude float64, rng *rand.Rand) []MarkerObs {
	dst = dst[:0]
	fromWorld := trackerToWorld.Inverse()
	for m, node := range nodes {
		if rng.Float64() < occlude {
			continue
		}
		var p [3]float64
		for a := range 3 {
			p[a] = tf.cur[3*node+a] + noiseM*rng.NormFloat64()
		}
		dst = append(dst, MarkerObs{Marker: m, PosTrackerM: fromWorld.Apply(p)})
	}
	return dst
}

// stateErrors returns the RMS 3-D position error over all nodes (m) and the
// RMS 3-D velocity error (m/s) of (xCur, xPrev) against the truth.
func stateErrors(xCur, xPrev, tCur, tPrev []float64, h float64) (posM, velMPerS float64) {
	nodes := len(xCur) / 3
	var sp, sv float64
	for i := range xCur {
		dp := xCur[i] - tCur[i]
		dv := ((xCur[i] - xPrev[i]) - (tCur[i] - tPrev[i])) / h
		sp += dp * dp
		sv += dv * dv
	}
	return math.Sqrt(sp / float64(nodes)), math.Sqrt(sv / float64(nodes))
}

// TestEstimatorDemoFigureNoisyOccluded tracks the demo jellyfish (20 nodes,
// 10 markers, 10 ms tick) through an invented 4 s joint motion, with 1 mm
// marker noise, each marker hidden with probability 0.2 every tick and the
// real figure's masses off by up to ±10 % from the model's.
//
// Bound: the RMS 3-D position error over all nodes, seen and unseen, after
// a 0.5 s settling time (the prior is the rest pose, 5 cm uncertain) must be
// below √3·1 mm = 1.73 mm, the 3-D RMS error of a single raw marker
// reading (three coordinates of σ = 1 mm each). Half of the demo's nodes
// carry no marker and a node in the middle of a tentacle is fixed by its
// seen neighbours only up to a swing about them, so this is not a loose
// bound for this figure. For scale, the model's rest pose for the measured
// joints (all one knows without markers) is logged too: it is off by
// 168 mm RMS on this motion. Measured: 1.51 mm position, 15.7 mm/s
// velocity (logged) with the default settings (marker offsets estimated:
// the filter then leaves part of what it sees to the offsets, whose truth
// here is zero; process acceleration 1.0 m/s², chosen for the closed
// loop, see DefaultProcessAccelMPerS2). With 0.3 m/s²: 1.34 mm, and
// 1.04 mm without the offsets.
func TestEstimatorDemoFigureNoisyOccluded(t *testing.T) {
	c := loadDemoCell(t)
	rng := rand.New(rand.NewPCG(20, 2))
	const t0, ticks, settle = 3.0, 400, 50
	truth := newTruthFigure(t, c, 0.1, rng, t0)
	est, err := NewCellEstimator(c, nil, EstimatorSettings{})
	if err != nil {
		t.Fatal(err)
	}
	nodes := make([]int, len(c.Markers))
	for i, m := range c.Markers {
		nodes[i] = m.Node
	}
	d := est.Dim()
	xCur, xPrev := make([]float64, d), make([]float64, d)
	var rep EstimatorReport
	var obs []MarkerObs
	// Baseline without markers: the model's rest pose for the measured joints.
	model, err := c.NewModel(c.TickS)
	if err != nil {
		t.Fatal(err)
	}
	restWS, kin := model.NewWorkspace(), c.NewWorkspace(nil)
	anchors, rest := make([]float64, 3*c.NumAnchors()), make([]float64, model.Dim())
	var sumP, sumV, sumRaw, sumRest float64
	var nRaw, n, nRest, rejected int
	for k := 0; k < ticks; k++ {
		if k > 0 {
			truth.step(t)
		}
		obs = truth.observe(obs, nodes, c.TrackerToWorld, 1e-3, 0.2, rng)
		if err := est.Observe(truth.tS, truth.q, obs, &rep); err != nil {
			t.Fatalf("tick %d: %v", k, err)
		}
		rejected += len(rep.Rejected)
		if k < settle {
			continue
		}
		est.StateTo(xCur, xPrev)
		ep, ev := stateErrors(xCur, xPrev, truth.cur, truth.prev, truth.h)
		sumP += ep * ep
		sumV += ev * ev
		n++
		if k%10 == 0 {
			kin.AnchorsTo(anchors, truth.q)
			if err := model.RestPose(restWS, rest, anchors); err != nil {
				t.Fatal(err)
			}
			er, _ := stateErrors(rest, rest, truth.cur, truth.cur, truth.h)
			sumRest += er * er
			nRest++
		}
		for _, o := range obs {
			w := c.TrackerToWorld.Apply(o.PosTrackerM)
			node := nodes[o.Marker]
			for a := range 3 {
				e := w[a] - truth.cur[3*node+a]
				sumRaw += e * e
			}
			nRaw++
		}
	}
	rmsP, rmsV, rmsRaw := math.Sqrt(sumP/float64(n)), math.Sqrt(sumV/float64(n)), math.Sqrt(sumRaw/float64(nRaw))
	rmsRest := math.Sqrt(sumRest / float64(nRest))
	t.Logf("demo figure, 1 mm noise, 20%% occlusion, ±10%% masses: RMS position error %.3f mm (all 20 nodes), velocity %.1f mm/s; raw marker 3-D RMS %.3f mm; rest pose for the joints (no markers) %.1f mm; %d markers rejected",
		1e3*rmsP, 1e3*rmsV, 1e3*rmsRaw, 1e3*rmsRest, rejected)
	if bound := math.Sqrt(3) * 1e-3; rmsP > bound {
		t.Errorf("RMS position error %.3f mm above the %.3f mm bound", 1e3*rmsP, 1e3*bound)
	}
}

// TestEstimatorIsConsistent checks that the filter's covariance describes
// its actual errors: the normalised estimation error squared, NEES =
// eᵀP⁻¹e over the whole state (x_k, x_{k−1}), averaged over ticks and
// divided by the state dimension, is 1 for a consistent filter (the NEES
// test of Bar-Shalom, Li and Kirubarajan 2001, §5.4, from memory). The
// real figure here is the model plus exactly the process noise the filter
// assumes (unmodelled accelerations of 0.3 m/s² per step), with 1 mm
// marker noise and 20 % occlusion, on the demo cell. The textbook
// acceptance interval assumes independent ticks and would be ±2 % here;
// successive errors are strongly correlated and the filter is an EKF, so
// the bounds are our judgement: [0.8, 1.25], a covariance a quarter too
// small or a fifth too large on average fails. Measured: 1.07 (1.05 with
// the earlier default of 0.3 m/s²). The truth
// has no marker offsets, so the filter runs without them
// (NoMarkerOffsets) and its model is the truth's exactly; with them it
// would carry 30 random-walk coordinates the truth does not have.
func TestEstimatorIsConsistent(t *testing.T) {
	c := loadDemoCell(t)
	rng := rand.New(rand.NewPCG(0, 9))
	truth := newTruthFigure(t, c, 0, rng, 1)
	est, err := NewCellEstimator(c, nil, EstimatorSettings{NoMarkerOffsets: true})
	if err != nil {
		t.Fatal(err)
	}
	nodes := demoMarkerNodes(c)
	d, n := est.Dim(), 2*est.Dim()
	noiseStd := c.TickS * c.TickS * DefaultProcessAccelMPerS2
	var rep EstimatorReport
	var obs []MarkerObs
	e := mat.NewVecDense(n, nil)
	pSym := mat.NewSymDense(n, nil)
	var chol mat.Cholesky
	var x mat.VecDense
	sum, count := 0.0, 0
	for k := 0; k < 300; k++ {
		if k > 0 {
			truth.step(t)
			for i := range truth.cur {
				truth.cur[i] += noiseStd * rng.NormFloat64()
			}
		}
		obs = truth.observe(obs, nodes, c.TrackerToWorld, 1e-3, 0.2, rng)
		if err := est.Observe(truth.tS, truth.q, obs, &rep); err != nil {
			t.Fatal(err)
		}
		if k < 50 {
			continue // the prior's 5 cm are still being worked off
		}
		for i := 0; i < d; i++ {
			e.SetVec(i, est.mean[i]-truth.cur[i])
			e.SetVec(d+i, est.mean[d+i]-truth.prev[i])
		}
		for i := 0; i < n; i++ {
			for j := i; j < n; j++ {
				pSym.SetSym(i, j, est.cov[i*n+j])
			}
		}
		if !chol.Factorize(pSym) {
			t.Fatalf("tick %d: covariance not positive definite", k)
		}
		if err := chol.SolveVecTo(&x, e); err != nil {
			t.Fatal(err)
		}
		sum += mat.Dot(&x, e)
		count++
	}
	nees := sum / float64(count) / float64(n)
	t.Logf("average NEES per state dimension: %.3f (consistent filter: 1)", nees)
	if nees < 0.8 || nees > 1.25 {
		t.Errorf("average NEES per dimension %.3f outside [0.8, 1.25]", nees)
	}
}
