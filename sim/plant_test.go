package sim

import (
	"math"
	"os"
	"slices"
	"strings"
	"testing"
)

func loadStandardProfile(t *testing.T) *MismatchProfile {
	t.Helper()
	data, err := os.ReadFile("../testdata/demo/standard.mismatch.json")
	if err != nil {
		t.Fatal(err)
	}
	p, err := ParseMismatch("standard.mismatch.json", data)
	if err != nil {
		t.Fatal(err)
	}
	return p
}

// With no mismatch the plant is the cell's model: the same steps, bit for bit.
func TestPlantWithoutMismatchIsTheModel(t *testing.T) {
	c := loadDemoCell(t)
	pl, err := NewPlant(c, nil)
	if err != nil {
		t.Fatal(err)
	}
	q := make([]float64, c.NumJoints())
	c.HomeTo(q)
	if err := pl.Settle(q, 0); err != nil {
		t.Fatal(err)
	}
	model, _ := c.NewModel(c.TickS)
	ws := c.NewWorkspace(model)
	x := slices.Clone(pl.Nodes())
	xPrev := slices.Clone(x)
	xNext := make([]float64, len(x))
	for k := 0; k < 50; k++ {
		q[0] = 0.1 * math.Sin(float64(k)*0.1)
		if err := pl.Advance(q); err != nil {
			t.Fatal(err)
		}
		if err := ws.Step(xNext, x, xPrev, q); err != nil {
			t.Fatal(err)
		}
		xPrev, x, xNext = x, xNext, xPrev
	}
	if !slices.Equal(x, pl.Nodes()) {
		t.Error("plant without mismatch differs from stepping the cell model")
	}
}

func TestMismatchIsWithinItsSpreadAndRepeatable(t *testing.T) {
	c := loadDemoCell(t)
	prof := loadStandardProfile(t)
	a, err := NewPlant(c, prof)
	if err != nil {
		t.Fatal(err)
	}
	b, _ := NewPlant(c, prof)
	sa, sb := a.Model().Strings(), b.Model().Strings()
	for i, s := range sa {
		r := s.RestLengthM / c.Strings[i].RestLengthM
		if d := math.Abs(r - 1); d < 0.025-1e-12 || d > 0.05+1e-12 {
			t.Errorf("string %d rest length ratio %v, want 1 ± [2.5%%, 5%%]", i, r)
		}
		if s != sb[i] {
			t.Errorf("string %d differs between two plants of the same seed", i)
		}
	}
	fa := a.Model().Figure()
	for i, n := range fa.Nodes {
		r := n.MassKg / c.Figure.Nodes[i].MassKg
		if d := math.Abs(r - 1); d < 0.05-1e-12 || d > 0.10+1e-12 {
			t.Errorf("node %d mass ratio %v, want 1 ± [5%%, 10%%]", i, r)
		}
	}
}

func TestPlantServoLagLatencyNoiseAndOcclusion(t *testing.T) {
	c := loadDemoCell(t)
	prof := loadStandardProfile(t)
	prof.Pushes = nil
	pl, err := NewPlant(c, prof)
	if err != nil {
		t.Fatal(err)
	}
	q := make([]float64, c.NumJoints())
	if err := pl.Settle(q, 0); err != nil {
		t.Fatal(err)
	}
	// Servo: a step command of 0.1 rad; after k ticks the first-order lag
	// has covered 1 − exp(−k·h/τ) of it (solution of τẏ + y = u sampled
	// exactly, any control text).
	cmd := slices.Clone(q)
	cmd[3] = 0.1
	obs := NewPlantObservation(c)
	var hidden, seen int
	var sumSq float64
	for k := 1; k <= 300; k++ {
		if err := pl.Advance(cmd); err != nil {
			t.Fatal(err)
		}
		if k <= 5 {
			want := 0.1 * (1 - math.Exp(-float64(k)*c.TickS/prof.ServoTimeConstantS))
			if got := pl.Joints()[3]; math.Abs(got-want) > 1e-12 {
				t.Errorf("tick %d: servo at %v, want %v", k, got, want)
			}
		}
		pl.Observe(obs)
		// Latency: 20 ms at a 10 ms tick is two ticks.
		if want := pl.TimeS() - 0.02; k > 2 && math.Abs(obs.CaptureTimeS-want) > 1e-9 {
			t.Fatalf("tick %d: capture time %v, want %v", k, obs.CaptureTimeS, want)
		}
		if k > 200 { // the figure is nearly still again: noise dominates
			x := pl.histX[(pl.head-2+len(pl.histT))%len(pl.histT)]
			for m, mk := range c.Markers {
				if !obs.Visible[m] {
					hidden++
					continue
				}
				seen++
				for j := 0; j < 3; j++ {
					d := obs.MarkersM[3*m+j] - x[3*mk.Node+j]
					sumSq += d * d
				}
			}
		}
	}
	// Occlusion: 1000 draws with p = 0.1; the binomial standard deviation
	// is √(1000·0.1·0.9) ≈ 9.5, so ±40 is over four sigma.
	if hidden < 60 || hidden > 140 {
		t.Errorf("%d of 1000 marker sightings hidden, want about 100", hidden)
	}
	// Noise: the sample standard deviation over ~2700 coordinates is within
	// 10% of 1 mm (its relative standard error is 1/√(2n) ≈ 1.4%).
	if sd := math.Sqrt(sumSq / float64(3*seen)); math.Abs(sd-0.001) > 1e-4 {
		t.Errorf("marker noise standard deviation %.3g m, want 0.001", sd)
	}
}

func TestPlantPushChangesVelocity(t *testing.T) {
	c := loadDemoCell(t)
	prof := &MismatchProfile{Pushes: []Push{{AtS: 0.05, Node: "mouth", VelocityMPerS: [3]float64{0.3, 0, 0}}}}
	pl, err := NewPlant(c, prof)
	if err != nil {
		t.Fatal(err)
	}
	q := make([]float64, c.NumJoints())
	if err := pl.Settle(q, 0); err != nil {
		t.Fatal(err)
	}
	mouth := c.Figure.NodeIndex("mouth")
	before := 0.0
	for k := 0; k < 8; k++ {
		x0 := pl.Nodes()[3*mouth]
		if err := pl.Advance(q); err != nil {
			t.Fatal(err)
		}
		v := (pl.Nodes()[3*mouth] - x0) / c.TickS
		if k < 5 && math.Abs(v) > 1e-6 {
			t.Errorf("tick %d: mouth moves at %v m/s before the push", k, v)
		}
		if k == 5 {
			before = v
		}
	}
	// The rods spread the push over the bell within the step, so the
	// mouth keeps only part of it; it must move clearly in +x.
	if before < 0.05 {
		t.Errorf("after the push the mouth moves at %v m/s in x, want a clear positive speed", before)
	}
}

func TestParseMismatchErrors(t *testing.T) {
	cases := map[string]string{
		`{"format": "tautline.mismatch/2"}`:                                    "format",
		`{"format": "tautline.mismatch/1", "mass_spread": 1.5}`:                "mass_spread",
		`{"format": "tautline.mismatch/1", "latency_s": -1}`:                   "latency_s",
		`{"format": "tautline.mismatch/1", "occlusion": 0.1}`:                  "occlusion",
		"{\"format\": \"tautline.mismatch/1\",\n \"marker_noise_m\": \"one\"}": "p.json:2:",
	}
	for src, want := range cases {
		_, err := ParseMismatch("p.json", []byte(src))
		if err == nil || !strings.Contains(err.Error(), want) || !strings.Contains(err.Error(), "p.json:") {
			t.Errorf("%s: got %v, want an error naming %q", src, err, want)
		}
	}
}
