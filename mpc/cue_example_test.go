package mpc_test

import (
	"fmt"

	"tautline/mpc"
)

// A cue with two rows is one rest-to-rest motion: 1.2 rad in 2 s peaks at
// 1.5·1.2/2 = 0.9 rad/s half-way and 6·1.2/2² = 1.8 rad/s² at the ends. The
// same motion in 0.5 s needs 28.8 rad/s² from the start, and the error says
// where.
// (Invented joints and limits.)
func ExampleParseCue() {
	joints := []mpc.CueJoint{
		{Name: "left.shoulder", Lower: -3, Upper: 3, MaxVelocity: 2, MaxAccel: 6},
		{Name: "left.elbow", Lower: -2, Upper: 2, MaxVelocity: 2, MaxAccel: 6},
	}
	settings := mpc.CueSettings{TickS: 0.004}

	slow := "# tautline.cue/1\ntime_s,left.elbow,left.shoulder\n0,0.5,0\n2,0.5,1.2\n"
	cue, err := mpc.ParseCue("slow.csv", []byte(slow), joints, settings)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("duration %g s, joints %v\n", cue.DurationS(), cue.JointNames())
	for _, p := range cue.Peaks() {
		fmt.Printf("%s: speed %.2f rad/s at %g s (%.0f%%), accel %.2f rad/s² at %g s (%.0f%%)\n",
			p.Name, p.PeakSpeed, p.PeakSpeedAtS, 100*p.PeakSpeedOfLimit, p.PeakAccel, p.PeakAccelAtS, 100*p.PeakAccelOfLimit)
	}
	q := make([]float64, 2)
	cue.PositionTo(q, 1)
	fmt.Printf("pose at 1 s: %.2f\n", q)

	fast := "time_s,left.elbow,left.shoulder\n0,0.5,0\n0.5,0.5,1.2\n"
	_, err = mpc.ParseCue("fast.csv", []byte(fast), joints, mpc.CueSettings{TickS: 0.004})
	fmt.Println(err)
	// Output:
	// duration 2 s, joints [left.shoulder left.elbow]
	// left.shoulder: speed 0.90 rad/s at 1 s (45%), accel 1.80 rad/s² at 0 s (30%)
	// left.elbow: speed 0.00 rad/s at 0 s (0%), accel 0.00 rad/s² at 0 s (0%)
	// pose at 1 s: [0.60 0.50]
	// fast.csv:2:7: left.shoulder (column 3): acceleration 28.8 rad/s² at t=0 s exceeds the limit 6 rad/s²; space the rows out or smooth the motion here
}
