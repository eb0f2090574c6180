package sim

import (
	"math"
	"math/rand/v2"
	"testing"
)

// Hand-written elementary rotations (right-handed, active), as in any
// robotics text, e.g. Spong, Hutchinson & Vidyasagar, Robot Modeling and
// Control, §2.2.
func handRx(a float64) [9]float64 {
	c, s := math.Cos(a), math.Sin(a)
	return [9]float64{1, 0, 0, 0, c, -s, 0, s, c}
}

func handRy(a float64) [9]float64 {
	c, s := math.Cos(a), math.Sin(a)
	return [9]float64{c, 0, s, 0, 1, 0, -s, 0, c}
}

func handRz(a float64) [9]float64 {
	c, s := math.Cos(a), math.Sin(a)
	return [9]float64{c, -s, 0, s, c, 0, 0, 0, 1}
}

// naiveMul is a plain triple loop, independent of the package's rotMul.
func naiveMul(a, b [9]float64) [9]float64 {
	var out [9]float64
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			for k := 0; k < 3; k++ {
				out[3*i+j] += a[3*i+k] * b[3*k+j]
			}
		}
	}
	return out
}

func maxAbsDiff9(a, b [9]float64) float64 {
	d := 0.0
	for i := range a {
		d = math.Max(d, math.Abs(a[i]-b[i]))
	}
	return d
}

func maxAbsDiff3(a, b [3]float64) float64 {
	return math.Max(math.Abs(a[0]-b[0]), math.Max(math.Abs(a[1]-b[1]), math.Abs(a[2]-b[2])))
}

// Entries are sums of at most four products of sines and cosines, each
// exact to half an ulp, so 1e-15 on values of size ≤ 1 is a few ulps.
const rotTol = 1e-15

// TestRPYSingleAxes: URDF specification (link/joint <origin rpy>): rpy is
// roll about the fixed x axis, pitch about fixed y, yaw about fixed z. With
// one angle non-zero, RPY must equal the elementary rotation about that axis.
func TestRPYSingleAxes(t *testing.T) {
	for _, a := range []float64{-3, -math.Pi / 2, -0.4, 0, 0.3, 1, math.Pi / 2, 2.5} {
		if d := maxAbsDiff9(RPY(a, 0, 0), handRx(a)); d > rotTol {
			t.Errorf("RPY(%v,0,0) differs from Rx by %g", a, d)
		}
		if d := maxAbsDiff9(RPY(0, a, 0), handRy(a)); d > rotTol {
			t.Errorf("RPY(0,%v,0) differs from Ry by %g", a, d)
		}
		if d := maxAbsDiff9(RPY(0, 0, a), handRz(a)); d > rotTol {
			t.Errorf("RPY(0,0,%v) differs from Rz by %g", a, d)
		}
	}
}

// TestRPYComposite: URDF specification: R = Rz(yaw)·Ry(pitch)·Rx(roll),
// checked against the product of the hand-written matrices and against
// rotations worked out by hand on the basis vectors.
func TestRPYComposite(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for i := 0; i < 50; i++ {
		r, p, y := rng.Float64()*6-3, rng.Float64()*3-1.5, rng.Float64()*6-3
		want := naiveMul(handRz(y), naiveMul(handRy(p), handRx(r)))
		if d := maxAbsDiff9(RPY(r, p, y), want); d > 4*rotTol {
			t.Errorf("RPY(%v,%v,%v) differs from Rz·Ry·Rx by %g", r, p, y, d)
		}
	}

	// By hand: roll π/2 takes y to z and z to -y; then yaw π/2 takes x to
	// y, y to -x and leaves z. So RPY(π/2, 0, π/2) sends x→y, y→z, z→x.
	pose := Pose{R: RPY(math.Pi/2, 0, math.Pi/2)}
	for _, c := range []struct{ in, want [3]float64 }{
		{[3]float64{1, 0, 0}, [3]float64{0, 1, 0}},
		{[3]float64{0, 1, 0}, [3]float64{0, 0, 1}},
		{[3]float64{0, 0, 1}, [3]float64{1, 0, 0}},
	} {
		if d := maxAbsDiff3(pose.Rotate(c.in), c.want); d > rotTol {
			t.Errorf("RPY(π/2,0,π/2)·%v = %v, want %v", c.in, pose.Rotate(c.in), c.want)
		}
	}
	// Fixed axes, not moving ones: roll π/2 takes y to z, then pitch π/2
	// about the fixed y takes z to x. (Moving axes would give z instead.)
	pose = Pose{R: RPY(math.Pi/2, math.Pi/2, 0)}
	if got := pose.Rotate([3]float64{0, 1, 0}); maxAbsDiff3(got, [3]float64{1, 0, 0}) > rotTol {
		t.Errorf("RPY(π/2,π/2,0)·y = %v, want x", got)
	}
}

// TestAxisAngle checks Rodrigues' formula against an independent
// construction: a change of basis Q whose third column is the axis, so the
// rotation about the axis is Q·Rz(θ)·Qᵀ (linear algebra, from memory).
func TestAxisAngle(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	for i := 0; i < 50; i++ {
		a := [3]float64{rng.NormFloat64(), rng.NormFloat64(), rng.NormFloat64()}
		n := math.Sqrt(a[0]*a[0] + a[1]*a[1] + a[2]*a[2])
		a = [3]float64{a[0] / n, a[1] / n, a[2] / n}
		theta := rng.Float64()*8 - 4
		// Gram-Schmidt: u ⟂ a, w = a×u.
		h := [3]float64{1, 0, 0}
		if math.Abs(a[0]) > 0.9 {
			h = [3]float64{0, 1, 0}
		}
		d := h[0]*a[0] + h[1]*a[1] + h[2]*a[2]
		u := [3]float64{h[0] - d*a[0], h[1] - d*a[1], h[2] - d*a[2]}
		un := math.Sqrt(u[0]*u[0] + u[1]*u[1] + u[2]*u[2])
		u = [3]float64{u[0] / un, u[1] / un, u[2] / un}
		w := [3]float64{a[1]*u[2] - a[2]*u[1], a[2]*u[0] - a[0]*u[2], a[0]*u[1] - a[1]*u[0]}
		q := [9]float64{u[0], w[0], a[0], u[1], w[1], a[1], u[2], w[2], a[2]}
		qt := [9]float64{q[0], q[3], q[6], q[1], q[4], q[7], q[2], q[5], q[8]}
		want := naiveMul(q, naiveMul(handRz(theta), qt))
		if diff := maxAbsDiff9(AxisAngle(a, theta), want); diff > 1e-14 {
			t.Errorf("AxisAngle(%v, %v) differs from Q·Rz·Qᵀ by %g", a, theta, diff)
		}
	}
	// About the coordinate axes it is the elementary rotation.
	for _, th := range []float64{-2, 0.7} {
		if d := maxAbsDiff9(AxisAngle([3]float64{0, 0, 1}, th), handRz(th)); d > rotTol {
			t.Errorf("AxisAngle(z, %v) differs from Rz by %g", th, d)
		}
		if d := maxAbsDiff9(AxisAngle([3]float64{0, 1, 0}, th), handRy(th)); d > rotTol {
			t.Errorf("AxisAngle(y, %v) differs from Ry by %g", th, d)
		}
		if d := maxAbsDiff9(AxisAngle([3]float64{1, 0, 0}, th), handRx(th)); d > rotTol {
			t.Errorf("AxisAngle(x, %v) differs from Rx by %g", th, d)
		}
	}
}

func randomPose(rng *rand.Rand) Pose {
	return PoseFromXYZRPY(
		[3]float64{rng.Float64()*4 - 2, rng.Float64()*4 - 2, rng.Float64()*4 - 2},
		[3]float64{rng.Float64()*6 - 3, rng.Float64()*3 - 1.5, rng.Float64()*6 - 3})
}

// TestPoseAlgebra: composition applies right to left, the inverse undoes
// a pose (rigid-transform algebra, from memory).
func TestPoseAlgebra(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	for i := 0; i < 50; i++ {
		a, b := randomPose(rng), randomPose(rng)
		p := [3]float64{rng.NormFloat64(), rng.NormFloat64(), rng.NormFloat64()}
		// Values up to ~6 m after two poses: 1e-14 is tens of ulps.
		if d := maxAbsDiff3(a.Mul(b).Apply(p), a.Apply(b.Apply(p))); d > 1e-14 {
			t.Errorf("(a·b)(p) differs from a(b(p)) by %g", d)
		}
		id := a.Inverse().Mul(a)
		if d := maxAbsDiff9(id.R, Identity().R); d > 1e-15 {
			t.Errorf("a⁻¹·a rotation differs from I by %g", d)
		}
		if d := maxAbsDiff3(id.P, [3]float64{}); d > 1e-14 {
			t.Errorf("a⁻¹·a translation %v, want 0", id.P)
		}
		if d := maxAbsDiff3(a.Inverse().Apply(a.Apply(p)), p); d > 1e-14 {
			t.Errorf("a⁻¹(a(p)) differs from p by %g", d)
		}
		// A rotation keeps lengths: RᵀR = I.
		rt := a.Inverse().R
		if d := maxAbsDiff9(naiveMul(rt, a.R), Identity().R); d > 1e-15 {
			t.Errorf("RᵀR differs from I by %g", d)
		}
	}
}
