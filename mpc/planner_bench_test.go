package mpc

import (
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"tautline/sim"
)

var (
	cos = math.Cos
	sin = math.Sin
)

// benchSetup returns a planner on the demo cell, warmed up over 20 ticks of
// closed loop from cue time 1 s, and the plant state there.
func benchSetup(b *testing.B, s PlannerSettings) (*Planner, *plant, *Plan, float64) {
	cell, cue := demoCell(b)
	return benchSetupCell(b, cell, cue, s)
}

func benchSetupCell(b *testing.B, cell *sim.Cell, cue *Cue, s PlannerSettings) (*Planner, *plant, *Plan, float64) {
	nom, err := SimulateNominal(cell, cue, cue.StartS(), 3, NominalSettings{})
	if err != nil {
		b.Fatal(err)
	}
	pl, err := NewPlanner(cell, cue, nom, s)
	if err != nil {
		b.Fatal(err)
	}
	ts := 1.0
	pt := newPlant(b, cell, nom, cue, ts)
	plan := pl.NewPlan()
	for range 20 {
		if err := pl.Tick(plan, ts, pt.q, pt.qPrev, pt.x, pt.xPrev, nil); err != nil {
			b.Fatal(err)
		}
		pt.apply(b, plan.Target)
		ts += cell.TickS
	}
	return pl, pt, plan, ts
}

// BenchmarkPlannerDemoTick is one whole tick (prepare + feedback) on the
// demo cell, repeated at the same tick time and state; p99-ns is the 99th
// percentile of the single ticks.
func BenchmarkPlannerDemoTick(b *testing.B) {
	pl, pt, plan, ts := benchSetup(b, PlannerSettings{})
	durations := make([]time.Duration, 0, b.N)
	b.ReportAllocs()
	b.ResetTimer()
	cpu := startCPU()
	for range b.N {
		t0 := time.Now()
		if err := pl.Tick(plan, ts, pt.q, pt.qPrev, pt.x, pt.xPrev, nil); err != nil {
			b.Fatal(err)
		}
		durations = append(durations, time.Since(t0))
	}
	cpu.report(b)
	reportP99(b, durations)
}

// cpuTimer reports CPU time per op ("cpu-ns/op"): on a shared 2-core
// machine wall time also counts the waits for a core.
type cpuTimer struct{ start float64 }

func startCPU() cpuTimer { return cpuTimer{processCPUSeconds()} }

func (c cpuTimer) report(b *testing.B) {
	b.ReportMetric((processCPUSeconds()-c.start)*1e9/float64(b.N), "cpu-ns/op")
}

// reportP99 reports the 99th percentile of durations.
func reportP99(b *testing.B, durations []time.Duration) {
	if len(durations) == 0 {
		return
	}
	slices.Sort(durations)
	b.ReportMetric(float64(durations[(len(durations)*99)/100].Nanoseconds()), "p99-ns")
}

// BenchmarkPlannerDemoPrepare is the prepare phase alone.
func BenchmarkPlannerDemoPrepare(b *testing.B) {
	pl, pt, _, ts := benchSetup(b, PlannerSettings{})
	b.ReportAllocs()
	b.ResetTimer()
	cpu := startCPU()
	for range b.N {
		if err := pl.Prepare(ts, pt.q, pt.qPrev, pt.x, pt.xPrev, nil); err != nil {
			b.Fatal(err)
		}
	}
	cpu.report(b)
}

// BenchmarkPlannerDemoFeedback is the feedback phase alone
// (observation → command), after one prepare.
func BenchmarkPlannerDemoFeedback(b *testing.B) {
	pl, pt, plan, ts := benchSetup(b, PlannerSettings{})
	if err := pl.Prepare(ts, pt.q, pt.qPrev, pt.x, pt.xPrev, nil); err != nil {
		b.Fatal(err)
	}
	durations := make([]time.Duration, 0, b.N)
	b.ReportAllocs()
	b.ResetTimer()
	cpu := startCPU()
	for range b.N {
		pl.st.prep = true
		t0 := time.Now()
		if err := pl.Feedback(plan, pt.x, pt.xPrev); err != nil {
			b.Fatal(err)
		}
		durations = append(durations, time.Since(t0))
	}
	cpu.report(b)
	reportP99(b, durations)
}

// grownDemoCell is the demo cell with its figure grown to nodes nodes by
// hanging extra chains of 30 g masses, 3 cm apart, from the jellyfish's
// mouth (invented, for scaling benchmarks only). Strings and markers stay
// as in the demo cell.
func grownDemoCell(b *testing.B, nodes int) (*sim.Cell, *Cue) {
	figPath := filepath.Join("..", "testdata", "demo", "jellyfish.figure.json")
	data, err := os.ReadFile(figPath)
	if err != nil {
		b.Fatal(err)
	}
	var fig map[string]any
	if err := json.Unmarshal(data, &fig); err != nil {
		b.Fatal(err)
	}
	ns := fig["nodes"].([]any)
	rods := fig["rods"].([]any)
	var mouth []any
	for _, n := range ns {
		if n.(map[string]any)["name"] == "mouth" {
			mouth = n.(map[string]any)["position_m"].([]any)
		}
	}
	const perChain = 10
	for chain := 0; len(ns) < nodes; chain++ {
		angle := float64(chain) * 2.399 // golden angle, spreads the chains
		prev := "mouth"
		for k := 1; k <= perChain && len(ns) < nodes; k++ {
			name := fmt.Sprintf("extra%d_%d", chain, k)
			r := 0.02 * float64(chain%5+1)
			pos := []float64{mouth[0].(float64) + r*cos(angle), mouth[1].(float64) + r*sin(angle), mouth[2].(float64) - 0.03*float64(k)}
			ns = append(ns, map[string]any{"name": name, "mass_kg": 0.03, "position_m": pos, "drag_ns_per_m": 0.02})
			rods = append(rods, map[string]any{"nodes": []string{prev, name}, "rest_length_m": "initial", "stiffness_n_per_m": 2000, "damping_ns_per_m": 2.0})
			prev = name
		}
	}
	fig["nodes"], fig["rods"] = ns, rods
	grown, err := json.Marshal(fig)
	if err != nil {
		b.Fatal(err)
	}
	read := func(path string) ([]byte, error) {
		if strings.HasSuffix(path, "jellyfish.figure.json") {
			return grown, nil
		}
		return os.ReadFile(path)
	}
	cell, err := sim.LoadCell("../testdata/demo/cell.json", read)
	if err != nil {
		b.Fatal(err)
	}
	_, cue := demoCell(b)
	return cell, cue
}

// BenchmarkPlannerScaling is the cost of one tick against figure size and
// horizon length (DESIGN §8): whole tick and feedback alone, demo cell
// with its figure grown to 20, 60 and 150 nodes, horizons of 10, 20 and 40
// steps of 25 ms.
func BenchmarkPlannerScaling(b *testing.B) {
	for _, nodes := range []int{20, 60, 150} {
		for _, steps := range []int{10, 20, 40} {
			for _, phase := range []string{"tick", "feedback"} {
				b.Run(fmt.Sprintf("nodes=%d/steps=%d/%s", nodes, steps, phase), func(b *testing.B) {
					cell, cue := grownDemoCell(b, nodes)
					if n := len(cell.Figure.Nodes); n != nodes {
						b.Fatalf("figure has %d nodes, want %d", n, nodes)
					}
					pl, pt, plan, ts := benchSetupCell(b, cell, cue, PlannerSettings{HorizonSteps: steps})
					b.ReportAllocs()
					b.ResetTimer()
					cpu := startCPU()
					var fbCPU float64
					for range b.N {
						if phase == "tick" {
							if err := pl.Tick(plan, ts, pt.q, pt.qPrev, pt.x, pt.xPrev, nil); err != nil {
								b.Fatal(err)
							}
							continue
						}
						b.StopTimer()
						if err := pl.Prepare(ts, pt.q, pt.qPrev, pt.x, pt.xPrev, nil); err != nil {
							b.Fatal(err)
						}
						b.StartTimer()
						c0 := processCPUSeconds()
						if err := pl.Feedback(plan, pt.x, pt.xPrev); err != nil {
							b.Fatal(err)
						}
						fbCPU += processCPUSeconds() - c0
					}
					if phase == "tick" {
						cpu.report(b)
					} else {
						b.ReportMetric(fbCPU*1e9/float64(b.N), "cpu-ns/op")
					}
				})
			}
		}
	}
}

// BenchmarkPlannerKnots measures the choice of correction knots per joint
// (PlannerSettings.KnotsPerJoint; 20 is one free correction per step): the
// demo cell's whole tick, and the push test's summed squared marker error
// relative to open-loop playback (closed/open, lower is better).
func BenchmarkPlannerKnots(b *testing.B) {
	open := runDemoLoop(b, PlannerSettings{}, 2.0, 0.05, 200, false)
	var sumOpen float64
	for _, e := range open.errAfter {
		sumOpen += e * e
	}
	for _, knots := range []int{2, 3, 4, 6, 10, 20} {
		b.Run(fmt.Sprintf("knots=%d", knots), func(b *testing.B) {
			s := PlannerSettings{KnotsPerJoint: knots}
			closed := runDemoLoop(b, s, 2.0, 0.05, 200, true)
			var sum float64
			for _, e := range closed.errAfter {
				sum += e * e
			}
			pl, pt, plan, ts := benchSetup(b, s)
			b.ReportAllocs()
			b.ResetTimer()
			cpu := startCPU()
			for range b.N {
				if err := pl.Tick(plan, ts, pt.q, pt.qPrev, pt.x, pt.xPrev, nil); err != nil {
					b.Fatal(err)
				}
			}
			cpu.report(b)
			b.ReportMetric(sum/sumOpen, "err-ratio")
		})
	}
}
