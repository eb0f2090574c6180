package sim

import (
	"fmt"
	"math"
	"testing"

	"gonum.org/v1/gonum/diff/fd"
	"gonum.org/v1/gonum/mat"
)

// plantRun records a run of the simulated plant for a fit: the arms
// settle at home, then sway (a few joints, sinusoids of 0.05–0.15 rad at
// 0.4–1.1 Hz, invented) for ticks ticks. Joints are the plant's true ones
// (what encoders measure); sightings come from Plant.Observe with their
// capture time mapped to a tick.
func plantRun(t testing.TB, cell *Cell, prof *MismatchProfile, ticks int) (FitRun, *Plant) {
	t.Helper()
	pl, err := NewPlant(cell, prof)
	if err != nil {
		t.Fatal(err)
	}
	nq := cell.NumJoints()
	home := make([]float64, nq)
	cell.HomeTo(home)
	if err := pl.Settle(home, 0); err != nil {
		t.Fatal(err)
	}
	run := FitRun{JointsQ: append([]float64(nil), home...)}
	obs := NewPlantObservation(cell)
	q := make([]float64, nq)
	h := cell.TickS
	observe := func() {
		pl.Observe(obs)
		k := int(math.Round(obs.CaptureTimeS / h))
		for m := range cell.Markers {
			if obs.Visible[m] {
				run.Sightings = append(run.Sightings, FitSighting{Tick: k, Marker: m, PosM: [3]float64{obs.MarkersM[3*m], obs.MarkersM[3*m+1], obs.MarkersM[3*m+2]}})
			}
		}
	}
	observe()
	for k := 1; k <= ticks; k++ {
		tt := float64(k) * h
		copy(q, home)
		for j := range nq {
			amp := 0.05 + 0.1*float64(j%3)/2
			f := 0.4 + 0.1*float64(j%7)
			ramp := math.Min(1, tt/0.5)
			q[j] += ramp * amp * math.Sin(2*math.Pi*f*tt+float64(j))
		}
		if err := pl.Advance(q); err != nil {
			t.Fatal(err)
		}
		run.JointsQ = append(run.JointsQ, pl.Joints()...)
		observe()
	}
	return run, pl
}

// The fit Jacobian (sensitivities of every parameter kind, through the
// rest pose alone (tick-0 sightings), one step and a 30-step rollout, and the tracker offset) against central
// differences of the residuals (gonum diff/fd). Each parameter's
// difference step is scaled so the markers move by about 1e-7 m, far above
// the step's rounding (GradTol 1e-15) and small enough for the truncation
// error (the residuals are smooth) — common practice for scaling a
// difference step; tolerance fdTol (1e-6 relative, the package's).
func TestFitJacobianAgainstFiniteDifferences(t *testing.T) {
	for _, ticks := range []int{1, 30} {
		t.Run(fmt.Sprintf("%d steps", ticks), func(t *testing.T) { testFitJacobian(t, ticks) })
	}
}

func testFitJacobian(t *testing.T, ticks int) {
	cell := loadDemoCell(t)
	run, _ := plantRun(t, cell, &MismatchProfile{Seed: 3, StringRestLengthSpread: 0.05}, ticks)
	// A second, shorter run with a servo lag checks the runs' row blocks.
	run2, _ := plantRun(t, cell, &MismatchProfile{Seed: 4, StringRestLengthSpread: 0.05, ServoTimeConstantS: 0.015}, max(1, ticks/2))
	var params []FitParam
	for _, g := range []string{"string_rest_lengths", "string_stiffnesses", "mass_groups", "node_masses", "damping", "tracker_offset"} {
		ps, err := ParseFitParams(cell, g)
		if err != nil {
			t.Fatal(err)
		}
		params = append(params, ps...)
	}
	// A few of each kind keeps the test fast.
	var pick []FitParam
	count := map[FitParamKind]int{}
	grouped := map[int]bool{}
	for _, p := range params {
		if p.Kind == FitNodeMass && grouped[p.Index] {
			continue // its mass is a picked group's
		}
		if count[p.Kind] < 2 {
			for _, i := range p.Nodes {
				grouped[i] = true
			}
			pick = append(pick, p)
			count[p.Kind]++
		}
	}
	prob := &FitProblem{Cell: cell, Params: pick, Runs: []FitRun{run, run2}, Settings: ModelSettings{GradTol: 1e-15}}
	if err := prob.Check(); err != nil {
		t.Fatal(err)
	}
	theta := make([]float64, len(pick))
	FitValues(theta, cell, pick)
	// Away from the nominal values, so scales are not all 1.
	for j := range theta {
		theta[j] *= 1 + 0.02*float64(j%3-1)
	}
	nr := prob.NumResiduals()
	r := make([]float64, nr)
	got := mat.NewDense(nr, len(pick), nil)
	if err := prob.Residuals(r, got, theta); err != nil {
		t.Fatal(err)
	}
	for j, p := range pick {
		var size float64
		for i := range nr {
			size = max(size, math.Abs(got.At(i, j)))
		}
		want := mat.NewDense(nr, 1, nil)
		th := append([]float64(nil), theta...)
		fd.Jacobian(want, func(dst, v []float64) {
			th[j] = v[0]
			if err := prob.Residuals(dst, nil, th); err != nil {
				t.Fatal(err)
			}
		}, []float64{theta[j]}, &fd.JacobianSettings{Formula: fd.Central, Step: 1e-7 / size})
		g := mat.NewDense(nr, 1, nil)
		g.Copy(got.Slice(0, nr, j, j+1))
		e := relErr(g, want)
		if e > fdTol {
			t.Errorf("%s: relative error %.2g", p.Name, e)
		}
		t.Logf("%s: largest |∂r/∂θ| %.3g, relative error %.2g", p.Name, size, e)
	}
}
