package mpc

import (
	"errors"
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"gonum.org/v1/gonum/stat/distuv"

	"tautline/sim"
)

// demoMarkerNodes returns the node of every marker of the cell.
func demoMarkerNodes(c *sim.Cell) []int {
	nodes := make([]int, len(c.Markers))
	for i, m := range c.Markers {
		nodes[i] = m.Node
	}
	return nodes
}

// TestDefaultGateIsChiSquareQuantile: the default gate is the 0.999
// quantile of the chi-square distribution with 3 degrees of freedom, as
// computed by gonum's distuv.ChiSquared (the constant is quoted to the 5
// significant digits of the printed tables, hence 5e-4).
func TestDefaultGateIsChiSquareQuantile(t *testing.T) {
	q := distuv.ChiSquared{K: 3}.Quantile(0.999)
	if math.Abs(q-DefaultGateChi2) > 5e-4 {
		t.Fatalf("DefaultGateChi2 = %g, chi-square(3) 0.999 quantile = %.6g", DefaultGateChi2, q)
	}
}

// TestEstimatorZeroNoiseAllMarkersIsExact: with a marker on every node, no
// marker noise and a real figure that is exactly the model, the Kalman
// update with R → 0 puts x_k on the measurement (K·H → I on the measured
// coordinates; Kalman 1960), and x_{k−1} was measured the tick before, so
// from the second observation on the estimate equals the true state. The
// tolerance, 1e-9 m, covers the step's own solve tolerance (0.1 nm) and
// the 1 nm noise floor; velocities are compared to 1e-9 m / h. The filter
// runs without marker offsets (NoMarkerOffsets), whose update this
// argument is about.
func TestEstimatorZeroNoiseAllMarkersIsExact(t *testing.T) {
	c := loadDemoCell(t)
	rng := rand.New(rand.NewPCG(1, 1))
	truth := newTruthFigure(t, c, 0, rng, 1.0)
	model, err := c.NewModel(c.TickS)
	if err != nil {
		t.Fatal(err)
	}
	proc, err := NewFigureProcess(model, c.NumJoints(), c.NewWorkspace(nil).AnchorsTo)
	if err != nil {
		t.Fatal(err)
	}
	all := make([]int, len(c.Figure.Nodes))
	for i := range all {
		all[i] = i
	}
	est, err := NewEstimator(proc, MarkerSet{Nodes: all, NoiseM: 0, TrackerToWorld: c.TrackerToWorld}, EstimatorSettings{NoMarkerOffsets: true})
	if err != nil {
		t.Fatal(err)
	}
	d := est.Dim()
	xCur, xPrev := make([]float64, d), make([]float64, d)
	var rep EstimatorReport
	var obs []MarkerObs
	for k := 0; k < 60; k++ {
		if k > 0 {
			truth.step(t)
		}
		obs = truth.observe(obs, all, c.TrackerToWorld, 0, 0, rng)
		if err := est.Observe(truth.tS, truth.q, obs, &rep); err != nil {
			t.Fatalf("tick %d: %v", k, err)
		}
		if rep.MarkersUsed != len(all) {
			t.Fatalf("tick %d: %d markers used, want %d (rejected %v)", k, rep.MarkersUsed, len(all), rep.Rejected)
		}
		if k == 0 {
			continue
		}
		est.StateTo(xCur, xPrev)
		for i := range xCur {
			if e := math.Abs(xCur[i] - truth.cur[i]); e > 1e-9 {
				t.Fatalf("tick %d: coordinate %d off by %g m", k, i, e)
			}
			if e := math.Abs(xPrev[i] - truth.prev[i]); e > 1e-9 {
				t.Fatalf("tick %d: previous coordinate %d off by %g m", k, i, e)
			}
		}
	}
}

// settledDemo runs the demo cell for ticks observations (1 mm noise, 20 %
// occlusion, exact model) and returns the estimator, the truth and the rng.
func settledDemo(t *testing.T, ticks int) (*Estimator, *truthFigure, *sim.Cell, *rand.Rand) {
	t.Helper()
	c := loadDemoCell(t)
	rng := rand.New(rand.NewPCG(7, 7))
	truth := newTruthFigure(t, c, 0, rng, 0.5)
	est, err := NewCellEstimator(c, nil, EstimatorSettings{})
	if err != nil {
		t.Fatal(err)
	}
	var rep EstimatorReport
	var obs []MarkerObs
	nodes := demoMarkerNodes(c)
	for k := 0; k < ticks; k++ {
		if k > 0 {
			truth.step(t)
		}
		obs = truth.observe(obs, nodes, c.TrackerToWorld, 1e-3, 0.2, rng)
		if err := est.Observe(truth.tS, truth.q, obs, &rep); err != nil {
			t.Fatalf("tick %d: %v", k, err)
		}
	}
	return est, truth, c, rng
}

// cloneEstimatorState copies the committed state for bitwise comparison.
func cloneEstimatorState(e *Estimator) (mean, cov []float64, k int64) {
	return slices.Clone(e.mean), slices.Clone(e.cov), e.k
}

// TestEstimatorRejectsGlitch: a marker 5 cm off its node (50 σ) fails the
// chi-square gate, is listed in the report with its χ² and leaves the
// update exactly as if it had not been seen (compared bitwise with the same
// observation without it).
func TestEstimatorRejectsGlitch(t *testing.T) {
	est, truth, c, rng := settledDemo(t, 100)
	nodes := demoMarkerNodes(c)
	twin, _, _, _ := settledDemo(t, 100)
	truth.step(t)
	obs := truth.observe(nil, nodes, c.TrackerToWorld, 1e-3, 0, rng)
	const glitched = 3
	obs[glitched].PosTrackerM[1] += 0.05
	var rep, twinRep EstimatorReport
	if err := est.Observe(truth.tS, truth.q, obs, &rep); err != nil {
		t.Fatal(err)
	}
	if len(rep.Rejected) != 1 || rep.Rejected[0].Marker != glitched || !(rep.Rejected[0].Chi2 > DefaultGateChi2) {
		t.Fatalf("rejected %+v, want marker %d above the gate", rep.Rejected, glitched)
	}
	if rep.MarkersUsed != len(obs)-1 || rep.GateOverruled {
		t.Fatalf("used %d of %d markers, overruled %v", rep.MarkersUsed, len(obs), rep.GateOverruled)
	}
	without := slices.Delete(slices.Clone(obs), glitched, glitched+1)
	if err := twin.Observe(truth.tS, truth.q, without, &twinRep); err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(est.mean, twin.mean) || !slices.Equal(est.cov, twin.cov) {
		t.Fatal("the rejected marker changed the update")
	}
	t.Logf("5 cm glitch: χ² = %.0f (gate %.3f)", rep.Rejected[0].Chi2, DefaultGateChi2)
}

// TestEstimatorGateOverruledWhenMostMarkersDisagree: when every marker is
// 3 cm off (the figure was knocked, or the state is wrong), the markers win
// and the report says so.
func TestEstimatorGateOverruledWhenMostMarkersDisagree(t *testing.T) {
	est, truth, c, rng := settledDemo(t, 100)
	truth.step(t)
	obs := truth.observe(nil, demoMarkerNodes(c), c.TrackerToWorld, 1e-3, 0, rng)
	for i := range obs {
		obs[i].PosTrackerM[0] += 0.03
	}
	var rep EstimatorReport
	if err := est.Observe(truth.tS, truth.q, obs, &rep); err != nil {
		t.Fatal(err)
	}
	if !rep.GateOverruled || rep.MarkersUsed != len(obs) || len(rep.Rejected) != 0 {
		t.Fatalf("overruled %v, used %d of %d, rejected %v", rep.GateOverruled, rep.MarkersUsed, len(obs), rep.Rejected)
	}
}

// TestEstimatorBadObservationsAreErrors: NaN or infinite values, unknown
// or repeated markers, wrong joint counts and times that do not move
// forward are errors, and the estimator is left bit for bit as it was.
func TestEstimatorBadObservationsAreErrors(t *testing.T) {
	est, truth, c, rng := settledDemo(t, 20)
	truth.step(t)
	good := truth.observe(nil, demoMarkerNodes(c), c.TrackerToWorld, 1e-3, 0, rng)
	mean, cov, k := cloneEstimatorState(est)
	q := truth.q
	badQ := slices.Clone(q)
	badQ[2] = math.Inf(1)
	nanObs := slices.Clone(good)
	nanObs[1].PosTrackerM[2] = math.NaN()
	unknown := append(slices.Clone(good), MarkerObs{Marker: len(c.Markers)})
	twice := append(slices.Clone(good[:2]), good[0])
	cases := []struct {
		name   string
		timeS  float64
		joints []float64
		obs    []MarkerObs
		want   error
	}{
		{"NaN marker", truth.tS, q, nanObs, ErrBadObservation},
		{"Inf joint", truth.tS, badQ, good, ErrBadObservation},
		{"NaN time", math.NaN(), q, good, ErrBadObservation},
		{"short joints", truth.tS, q[:3], good, ErrBadObservation},
		{"unknown marker", truth.tS, q, unknown[len(unknown)-1:], ErrBadObservation},
		{"repeated marker", truth.tS, q, twice, ErrBadObservation},
		{"same grid time", est.TimeS() + 0.3*est.StepS(), q, good, ErrTimeOrder},
		{"backwards", est.TimeS() - 1, q, good, ErrTimeOrder},
	}
	var rep EstimatorReport
	for _, tc := range cases {
		err := est.Observe(tc.timeS, tc.joints, tc.obs, &rep)
		if !errors.Is(err, tc.want) {
			t.Errorf("%s: error %v, want %v", tc.name, err, tc.want)
		}
		m2, c2, k2 := cloneEstimatorState(est)
		if !slices.Equal(m2, mean) || !slices.Equal(c2, cov) || k2 != k {
			t.Fatalf("%s: the estimator changed", tc.name)
		}
	}
	if err := est.RecordCommand(truth.tS, badQ); !errors.Is(err, ErrBadObservation) {
		t.Errorf("Inf command: %v", err)
	}
	if err := est.Observe(truth.tS, q, good, &rep); err != nil {
		t.Fatalf("a good observation after the bad ones: %v", err)
	}
}

// TestEstimatorCountsTicksWithoutMarkers: observations with no marker
// count up, the report turns stale at StaleAfterTicks, one accepted marker
// resets the count.
func TestEstimatorCountsTicksWithoutMarkers(t *testing.T) {
	est, truth, c, rng := settledDemo(t, 20)
	var rep EstimatorReport
	for i := 1; i <= DefaultStaleAfterTicks+1; i++ {
		truth.step(t)
		if err := est.Observe(truth.tS, truth.q, nil, &rep); err != nil {
			t.Fatal(err)
		}
		if rep.TicksWithoutMarkers != i || rep.Stale != (i >= DefaultStaleAfterTicks) || rep.MarkersUsed != 0 {
			t.Fatalf("after %d empty observations: %+v", i, rep)
		}
	}
	truth.step(t)
	obs := truth.observe(nil, demoMarkerNodes(c), c.TrackerToWorld, 1e-3, 0, rng)
	if err := est.Observe(truth.tS, truth.q, obs[:1], &rep); err != nil {
		t.Fatal(err)
	}
	if rep.TicksWithoutMarkers != 0 || rep.Stale || rep.MarkersUsed != 1 {
		t.Fatalf("after a marker: %+v", rep)
	}
}

// TestEstimatorReset: after Reset the next observation initialises again,
// at any time, even an earlier one.
func TestEstimatorReset(t *testing.T) {
	est, truth, c, rng := settledDemo(t, 10)
	obs := truth.observe(nil, demoMarkerNodes(c), c.TrackerToWorld, 1e-3, 0, rng)
	est.Reset()
	if est.Initialised() {
		t.Fatal("initialised after Reset")
	}
	var rep EstimatorReport
	if err := est.Observe(truth.tS-5, truth.q, obs, &rep); err != nil {
		t.Fatal(err)
	}
	if !rep.Initialised || est.TimeS() != truth.tS-5 {
		t.Fatalf("report %+v, time %g", rep, est.TimeS())
	}
}

// TestPathJointsInterpolatesCommands checks the joint path by hand-worked
// linear interpolation: start (0.99 s, 0), commands (1.00 s, 1) and
// (1.02 s, 3), optional end (1.015 s, 10).
func TestPathJointsInterpolatesCommands(t *testing.T) {
	e := &Estimator{nj: 1, cmds: newCommandRing(2, 1)}
	if err := e.RecordCommand(0.95, []float64{-7}); err != nil { // before the start: ignored, then overwritten
		t.Fatal(err)
	}
	for _, c := range []struct{ t, q float64 }{{1.00, 1}, {1.02, 3}} {
		if err := e.RecordCommand(c.t, []float64{c.q}); err != nil {
			t.Fatal(err)
		}
	}
	if err := e.RecordCommand(1.01, []float64{0}); !errors.Is(err, ErrTimeOrder) {
		t.Fatalf("earlier apply time: %v", err)
	}
	if err := e.RecordCommand(1.02, []float64{-1}); err != nil {
		t.Fatalf("repeated apply time: %v", err)
	}
	if err := e.RecordCommand(1.02, []float64{3}); err != nil { // replaces −1
		t.Fatalf("repeated apply time: %v", err)
	}
	dst := []float64{0}
	for _, c := range []struct {
		t    float64
		end  bool
		want float64
	}{
		{0.98, false, 0}, {0.995, false, 0.5}, {1.00, false, 1}, {1.01, false, 2}, {1.02, false, 3}, {1.05, false, 3},
		{1.01, true, 1 + 9*0.01/0.015}, {1.015, true, 10}, {1.02, true, 10},
	} {
		var end []float64
		if c.end {
			end = []float64{10}
		}
		e.pathJoints(dst, c.t, 0.99, []float64{0}, 1.015, end, nil)
		if math.Abs(dst[0]-c.want) > 1e-12 {
			t.Errorf("t %g end %v: %g, want %g", c.t, c.end, dst[0], c.want)
		}
	}
}

// TestEstimatorLongGapsAreBounded: an observation more than MaxPredictSteps
// steps after the filter re-initialises it instead of predicting through
// the gap, and PredictTo refuses to look further ahead than that.
func TestEstimatorLongGapsAreBounded(t *testing.T) {
	est, truth, c, rng := settledDemo(t, 10)
	xCur, xPrev := make([]float64, est.Dim()), make([]float64, est.Dim())
	far := est.TimeS() + float64(DefaultMaxPredictSteps+1)*est.StepS()
	if err := est.PredictTo(xCur, xPrev, far); !errors.Is(err, ErrPredictTooFar) {
		t.Fatalf("PredictTo %d steps ahead: %v", DefaultMaxPredictSteps+1, err)
	}
	if err := est.PredictTo(xCur, xPrev, far-est.StepS()); err != nil {
		t.Fatalf("PredictTo %d steps ahead: %v", DefaultMaxPredictSteps, err)
	}
	obs := truth.observe(nil, demoMarkerNodes(c), c.TrackerToWorld, 1e-3, 0, rng)
	var rep EstimatorReport
	if err := est.Observe(far, truth.q, obs, &rep); err != nil {
		t.Fatal(err)
	}
	if !rep.Initialised || rep.StepsPredicted != 0 || est.TimeS() != far {
		t.Fatalf("after a gap of %d steps: report %+v, time %g", DefaultMaxPredictSteps+1, rep, est.TimeS())
	}
	// Absurdly far: the grid index must not overflow into "the past".
	if err := est.Observe(1e300, truth.q, obs, &rep); err != nil || !rep.Initialised {
		t.Fatalf("observation at 1e300 s: %v, report %+v", err, rep)
	}
}

// TestTrackingOffsetShiftsCommands checks the tracking offset and the
// biased path by hand: commands (1.00 s, 1) and (1.02 s, 3), the arm
// measured at 0.9 at the filter's time 1.00 s, so the offset is −0.1 and
// the path runs from (1.00, 0.9) to (1.02, 2.9) and holds 2.9.
func TestTrackingOffsetShiftsCommands(t *testing.T) {
	e := &Estimator{nj: 1, cmds: newCommandRing(4, 1), init: true, t0: 1.00, h: 0.01, joints: []float64{0.9}}
	for _, c := range []struct{ t, q float64 }{{1.00, 1}, {1.02, 3}} {
		if err := e.RecordCommand(c.t, []float64{c.q}); err != nil {
			t.Fatal(err)
		}
	}
	bias := []float64{0}
	if !e.trackingOffsetTo(bias) || math.Abs(bias[0]+0.1) > 1e-15 {
		t.Fatalf("tracking offset %v, want −0.1", bias)
	}
	dst := []float64{0}
	for _, c := range []struct{ t, want float64 }{{1.00, 0.9}, {1.01, 1.9}, {1.02, 2.9}, {1.05, 2.9}} {
		e.pathJoints(dst, c.t, 1.00, e.joints, 0, nil, bias)
		if math.Abs(dst[0]-c.want) > 1e-12 {
			t.Errorf("t %g: %g, want %g", c.t, dst[0], c.want)
		}
	}
	e.k = 5 // filter time 1.05 s: past the last command, no offset known
	if e.trackingOffsetTo(bias) || bias[0] != 0 {
		t.Fatalf("offset past the commands: %v", bias)
	}
}
