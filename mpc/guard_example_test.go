package mpc

import (
	"fmt"
	"math"
)

// A joint 0.024 rad below its upper limit, moving towards it at 1 rad/s
// (0.004 rad per 4 ms tick), is wished straight through the limit. At
// 20 rad/s² the step may change by da = 0.00032 rad per tick, so one more
// tick at this speed and then braking as hard as allowed travels
// 0.004 + (0.00368 + 0.00336 + … + 0.00032) = 0.027 rad: too far. The guard
// sends the largest step from which braking still stops at the limit,
// 0.024/12 + 11·0.00032/2 = 0.00376 rad (the formula derived in guard.go),
// and a NaN wish gets the hardest braking step, 0.004 − 0.00032 = 0.00368.
// (Invented numbers.)
func ExampleGuard_Apply() {
	g, err := NewGuard([]JointBounds{{Name: "a1.j1", Lower: -1, Upper: 1, MaxVelocity: 2, MaxAccel: 20}}, 0.004)
	if err != nil {
		fmt.Println(err)
		return
	}
	prev2, prev := []float64{0.972}, []float64{0.976}
	dst := make([]float64, 1)
	var rep GuardReport
	g.Apply(dst, []float64{1.2}, prev, prev2, &rep)
	fmt.Printf("target %.5f rad (%.2f rad/s), bounds acted: %v\n", dst[0], (dst[0]-prev[0])/0.004, rep.Acted[0])
	g.Apply(dst, []float64{math.NaN()}, prev, prev2, &rep)
	fmt.Printf("target %.5f rad (%.2f rad/s), bounds acted: %v\n", dst[0], (dst[0]-prev[0])/0.004, rep.Acted[0])
	// Output:
	// target 0.97976 rad (0.94 rad/s), bounds acted: position+velocity+accel+viability
	// target 0.97968 rad (0.92 rad/s), bounds acted: not-finite
}
