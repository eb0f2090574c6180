package mpc_test

import (
	"fmt"

	"tautline/mpc"
	"tautline/sim"
)

// An estimator on a one-node figure held between two anchored nodes, with
// no strings and so no joints: it observes the node's marker for three
// ticks of 10 ms, one of them occluded, and predicts 30 ms ahead. The bob
// rests at z = (300·0.55 + 200·0.40 − 0.2·9.80665)/500 m = 486.1 mm; seen
// about 2 cm above that, it swings back down through its rest pose (period
// 2π·√(0.2/500) s = 126 ms). The filter also estimates the marker's
// offset from its node (see Marker offsets on Estimator), and puts most of
// the 2 cm down to it: a bob released 2 cm high would have fallen further
// in 20 ms than the second frame shows, while a marker sitting high on a
// bob near rest explains both frames.
func ExampleEstimator() {
	fig := &sim.Figure{
		Nodes: []sim.Node{
			{Name: "top", MassKg: 1, PositionM: [3]float64{0, 0, 1}, Anchored: true},
			{Name: "bob", MassKg: 0.2, PositionM: [3]float64{0, 0, 0.5}, DragNsPerM: 0.05},
			{Name: "bottom", MassKg: 1, PositionM: [3]float64{0, 0, 0}, Anchored: true},
		},
		Rods: []sim.Rod{
			{A: 0, B: 1, RestLengthM: 0.45, StiffnessNPerM: 300, DampingNsPerM: 0.5},
			{A: 1, B: 2, RestLengthM: 0.40, StiffnessNPerM: 200, DampingNsPerM: 0.3},
		},
	}
	model, err := sim.NewModel(fig, nil, sim.ModelSettings{StepS: 0.01})
	if err != nil {
		fmt.Println(err)
		return
	}
	proc, err := mpc.NewFigureProcess(model, 0, nil)
	if err != nil {
		fmt.Println(err)
		return
	}
	markers := mpc.MarkerSet{Nodes: []int{1}, NoiseM: 0.001, TrackerToWorld: sim.Identity()}
	est, err := mpc.NewEstimator(proc, markers, mpc.EstimatorSettings{})
	if err != nil {
		fmt.Println(err)
		return
	}
	frames := []struct {
		captureS float64
		zM       []float64 // empty: the marker is hidden
	}{{2.000, []float64{0.510}}, {2.010, nil}, {2.020, []float64{0.505}}}
	var rep mpc.EstimatorReport
	for _, f := range frames {
		var obs []mpc.MarkerObs
		for _, z := range f.zM {
			obs = append(obs, mpc.MarkerObs{Marker: 0, PosTrackerM: [3]float64{0, 0, z}})
		}
		if err := est.Observe(f.captureS, nil, obs, &rep); err != nil {
			fmt.Println(err)
			return
		}
		fmt.Printf("t=%.2f s: %d marker(s) used, %d tick(s) without markers\n", rep.GridTimeS, rep.MarkersUsed, rep.TicksWithoutMarkers)
	}
	xCur, xPrev := make([]float64, est.Dim()), make([]float64, est.Dim())
	if err := est.PredictTo(xCur, xPrev, 2.050); err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("bob at 2.05 s: z = %.1f mm\n", 1e3*xCur[5])
	offset := make([]float64, 3)
	est.MarkerOffsetTo(offset)
	fmt.Printf("marker offset: z = %.1f mm\n", 1e3*offset[2])
	// Output:
	// t=2.00 s: 1 marker(s) used, 0 tick(s) without markers
	// t=2.01 s: 0 marker(s) used, 1 tick(s) without markers
	// t=2.02 s: 1 marker(s) used, 0 tick(s) without markers
	// bob at 2.05 s: z = 482.8 mm
	// marker offset: z = 13.6 mm
}
