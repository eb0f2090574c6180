package sim_test

import (
	"fmt"
	"log"
	"math"
	"os"

	"tautline/sim"
)

// A bob on a stiff rod (testdata/figures/pendulum.json, invented), let go
// 0.1 rad from the vertical: step it for one small-angle period
// 2π√(L/g) and see it return close to where it started, then ask how its
// position after one step depends on the initial state.
func ExampleModel_Step() {
	data, err := os.ReadFile("testdata/figures/pendulum.json")
	if err != nil {
		log.Fatal(err)
	}
	fig, err := sim.ParseFigure("pendulum.json", data)
	if err != nil {
		log.Fatal(err)
	}
	const h = 0.001
	m, err := sim.NewModel(fig, nil, sim.ModelSettings{StepS: h})
	if err != nil {
		log.Fatal(err)
	}
	x := make([]float64, m.Dim())
	m.InitialState(x)
	x[3], x[5] = math.Sin(0.1), 2-math.Cos(0.1) // bob 0.1 rad out, at rest
	xPrev := append([]float64(nil), x...)
	xNext := make([]float64, m.Dim())
	ws := m.NewWorkspace()
	period := 2 * math.Pi * math.Sqrt(1/sim.StandardGravityMPerS2)
	steps := int(math.Round(period / h))
	for k := range steps {
		if err := m.Step(ws, xNext, x, xPrev, nil); err != nil {
			log.Fatal(err)
		}
		if k == 0 {
			dx := make([]float64, m.Dim())
			dir := make([]float64, m.Dim())
			dir[3] = 1 // shift the bob sideways, now and one step ago
			ws.Sensitivity(dx, dir, dir, nil)
			// Along the swing the shift passes almost unchanged; its small
			// part along the tilted rod (sin²0.1 ≈ 1%) is pulled back by
			// the stiff rod within the step.
			fmt.Printf("sideways shift after one step per metre of shift: %.4f\n", dx[3])
		}
		xPrev, x, xNext = x, xNext, xPrev
	}
	fmt.Printf("after %d steps (one period) the bob is at x = %.3f m (started at %.3f m)\n", steps, x[3], math.Sin(0.1))
	kin, pot := m.Energy(x, xPrev, nil)
	fmt.Printf("kinetic energy %.4f J, potential %.3f J\n", kin, pot)
	// Output:
	// sideways shift after one step per metre of shift: 0.9991
	// after 2006 steps (one period) the bob is at x = 0.099 m (started at 0.100 m)
	// kinetic energy 0.0000 J, potential 9.854 J
}
