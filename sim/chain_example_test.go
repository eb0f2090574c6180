package sim_test

import (
	"fmt"
	"os"

	"tautline/sim"
)

// Read the invented demo arm, take the chain from its base to its flange,
// place it in the world and ask where a bar point is and how it moves with
// each joint.
func ExampleURDF_Chain() {
	const file = "../testdata/demo/arm6.urdf"
	data, err := os.ReadFile(file)
	if err != nil {
		fmt.Println(err)
		return
	}
	u, err := sim.ParseURDF(file, data)
	if err != nil {
		fmt.Println(err)
		return
	}
	arm, err := u.Chain("base_link", "flange")
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, j := range arm.Joints() {
		fmt.Printf("%s %s [%.2f, %.2f] rad, %.1f rad/s\n", j.Name, j.Kind, j.Lower, j.Upper, j.VelocityLimit)
	}

	ws := arm.NewWorkspace() // once per arm; reused every tick
	base := sim.PoseFromXYZRPY([3]float64{0, 0.6, 0}, [3]float64{0, 0, 0})
	home := make([]float64, arm.NumJoints())
	flange := arm.Forward(ws, base, home)
	zAxis := flange.Rotate([3]float64{0, 0, 1})
	fmt.Printf("flange at (%.2f, %.2f, %.2f) m, its z axis (%.2f, %.2f, %.2f)\n",
		flange.P[0], flange.P[1], flange.P[2], zero(zAxis[0]), zero(zAxis[1]), zero(zAxis[2]))

	barPoint := [3]float64{0, 0.25, 0.05} // in the flange frame, m
	p := ws.Point(barPoint)
	fmt.Printf("bar point at (%.2f, %.2f, %.2f) m\n", p[0], p[1], p[2])
	// Column i is ωᵢ×(p − oᵢ). Worked by hand from the URDF's numbers the
	// printed values agree; e.g. j1 turns about z through (0, 0.6): z ×
	// (0.71, −0.25, ·) = (0.25, 0.71, 0).
	jac := make([]float64, 3*arm.NumJoints())
	ws.PointJacobian(jac, barPoint)
	for r, axis := range []string{"x", "y", "z"} {
		fmt.Printf("d%s/dq:", axis)
		for k := 0; k < arm.NumJoints(); k++ {
			fmt.Printf(" %6.3f", zero(jac[r*arm.NumJoints()+k]))
		}
		fmt.Println()
	}
	// Output:
	// j1 revolute [-2.90, 2.90] rad, 2.0 rad/s
	// j2 revolute [-1.75, 1.75] rad, 1.8 rad/s
	// j3 revolute [-2.20, 1.30] rad, 2.0 rad/s
	// j4 revolute [-3.00, 3.00] rad, 2.6 rad/s
	// j5 revolute [-2.05, 2.05] rad, 2.6 rad/s
	// j6 revolute [-3.05, 3.05] rad, 3.0 rad/s
	// flange at (0.71, 0.60, 1.96) m, its z axis (0.00, 0.00, -1.00)
	// bar point at (0.71, 0.35, 1.91) m
	// dx/dq:  0.250  0.510 -0.070  0.000 -0.170 -0.250
	// dy/dq:  0.710  0.000  0.000  0.170  0.000  0.000
	// dz/dq:  0.000 -0.560 -0.560 -0.250  0.000  0.000
}

// zero maps rounding noise around 0 to 0 so it prints without a sign.
func zero(x float64) float64 {
	if x > -1e-9 && x < 1e-9 {
		return 0
	}
	return x
}
