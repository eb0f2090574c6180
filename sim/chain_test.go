package sim

import (
	"errors"
	"math"
	"math/rand/v2"
	"path/filepath"
	"strings"
	"testing"

	"gonum.org/v1/gonum/diff/fd"
	"gonum.org/v1/gonum/mat"
)

var (
	planarPath = filepath.Join("testdata", "urdf", "planar2.urdf")
	gantryPath = filepath.Join("testdata", "urdf", "gantry3.urdf")
	mixedPath  = filepath.Join("testdata", "urdf", "mixed.urdf")
)

// TestPlanarTwoLink: the tip of a planar two-link arm against the closed
// form x = l1·cos q1 + l2·cos(q1+q2), y = l1·sin q1 + l2·sin(q1+q2) (Spong,
// Hutchinson & Vidyasagar, Robot Modeling and Control, the two-link planar
// arm), and its orientation, a rotation by q1+q2 about z.
func TestPlanarTwoLink(t *testing.T) {
	const l1, l2 = 0.7, 0.45 // m, as written in planar2.urdf
	c := loadTestChain(t, planarPath, "base_link", "tip")
	if c.NumJoints() != 2 {
		t.Fatalf("%d joints, want 2", c.NumJoints())
	}
	ws := c.NewWorkspace()
	rng := rand.New(rand.NewPCG(7, 8))
	base := PoseFromXYZRPY([3]float64{0.3, -1.2, 0.8}, [3]float64{0.2, -0.4, 1.1})
	for i := 0; i < 100; i++ {
		q := []float64{rng.Float64()*2*math.Pi - math.Pi, rng.Float64()*4*math.Pi - 2*math.Pi}
		want := [3]float64{
			l1*math.Cos(q[0]) + l2*math.Cos(q[0]+q[1]),
			l1*math.Sin(q[0]) + l2*math.Sin(q[0]+q[1]),
			0,
		}
		tip := c.Forward(ws, Identity(), q)
		// Lengths ≤ 1.15 m through a few products: 1e-14 m is tens of ulps.
		if d := maxAbsDiff3(tip.P, want); d > 1e-14 {
			t.Errorf("q=%v: tip %v, closed form %v (diff %g)", q, tip.P, want, d)
		}
		if d := maxAbsDiff9(tip.R, handRz(q[0]+q[1])); d > 1e-14 {
			t.Errorf("q=%v: tip rotation differs from Rz(q1+q2) by %g", q, d)
		}
		// The same arm placed anywhere in the world: the base pose applies.
		tip = c.Forward(ws, base, q)
		if d := maxAbsDiff3(tip.P, base.Apply(want)); d > 1e-14 {
			t.Errorf("q=%v with a base pose: tip %v, want %v", q, tip.P, base.Apply(want))
		}
	}
}

// TestGantry: a three-axis Cartesian gantry's tip is the joint vector plus
// the constant offset of the origins, and its position Jacobian is the
// identity (prismatic columns are the joint axes: DESIGN §4.2).
func TestGantry(t *testing.T) {
	offset := [3]float64{0.1, 0.2, 1.5} // m, sum of the origins in gantry3.urdf
	c := loadTestChain(t, gantryPath, "floor", "tool")
	ws := c.NewWorkspace()
	jac := make([]float64, 9)
	rng := rand.New(rand.NewPCG(9, 10))
	for i := 0; i < 20; i++ {
		q := []float64{rng.Float64()*2 - 1, rng.Float64()*2 - 1, rng.Float64() - 0.5}
		tip := c.Forward(ws, Identity(), q)
		want := [3]float64{q[0] + offset[0], q[1] + offset[1], q[2] + offset[2]}
		if d := maxAbsDiff3(tip.P, want); d > 1e-15 {
			t.Errorf("q=%v: tip %v, want %v", q, tip.P, want)
		}
		ws.PointJacobian(jac, [3]float64{0.05, -0.02, 0.1})
		if d := maxAbsDiff9([9]float64(jac), Identity().R); d != 0 {
			t.Errorf("q=%v: Jacobian %v, want the identity", q, jac)
		}
	}
}

// fdCheckChain compares PointJacobian with central differences of Point
// from gonum's diff/fd at random configurations (fixed seed). With fd's
// default central step (about 6e-6) the truncation error is of order h²
// times the third derivative and the rounding error of order ε·|p|/h,
// both below about 1e-10 on metre-sized values, so 1e-6 relative to the
// largest entry is a wide margin that still catches any wrong column.
func fdCheckChain(t *testing.T, c *Chain, base Pose, pTip [3]float64, seed uint64, samples int) {
	t.Helper()
	n := c.NumJoints()
	ws := c.NewWorkspace()
	fws := c.NewWorkspace()
	rng := rand.New(rand.NewPCG(seed, 11))
	got := make([]float64, 3*n)
	want := mat.NewDense(3, n, nil)
	q := make([]float64, n)
	for s := 0; s < samples; s++ {
		for i, j := range c.Joints() {
			lo, hi := j.Lower, j.Upper
			if math.IsInf(lo, 0) || math.IsInf(hi, 0) {
				lo, hi = -math.Pi, math.Pi
			}
			q[i] = lo + (hi-lo)*rng.Float64()
		}
		c.Forward(ws, base, q)
		ws.PointJacobian(got, pTip)
		fd.Jacobian(want, func(y, x []float64) {
			c.Forward(fws, base, x)
			p := fws.Point(pTip)
			copy(y, p[:])
		}, q, &fd.JacobianSettings{Formula: fd.Central})
		maxAbs := 0.0
		for r := 0; r < 3; r++ {
			for k := 0; k < n; k++ {
				maxAbs = math.Max(maxAbs, math.Abs(want.At(r, k)))
			}
		}
		if maxAbs == 0 {
			t.Fatalf("finite-difference Jacobian is zero at q=%v", q)
		}
		for r := 0; r < 3; r++ {
			for k := 0; k < n; k++ {
				if d := math.Abs(got[r*n+k] - want.At(r, k)); d > 1e-6*maxAbs {
					t.Errorf("%s q=%v: J[%d,%d] = %v, central differences %v", c.Robot, q, r, k, got[r*n+k], want.At(r, k))
				}
			}
		}
	}
}

// TestJacobianMatchesFiniteDifferences checks every chain's point Jacobian
// against gonum diff/fd, with a point offset in the tip frame and the base
// placed away from the world origin.
func TestJacobianMatchesFiniteDifferences(t *testing.T) {
	base := PoseFromXYZRPY([3]float64{-0.6, 0.6, 0.05}, [3]float64{0.02, -0.03, 0.8})
	pTip := [3]float64{0.12, -0.35, 0.06}
	for _, tc := range []struct {
		path, base, tip string
	}{
		{planarPath, "base_link", "tip"},
		{gantryPath, "floor", "tool"},
		{mixedPath, "base", "end"},
		{demoArmPath, "base_link", "flange"},
		{demoArmPath, "turret", "wrist_pitch"}, // a chain from the middle of the tree
	} {
		t.Run(filepath.Base(tc.path)+":"+tc.base+"→"+tc.tip, func(t *testing.T) {
			c := loadTestChain(t, tc.path, tc.base, tc.tip)
			fdCheckChain(t, c, base, pTip, 12, 20)
		})
	}
}

// TestDemoArmHome: at all joints zero the flange sits where the sum of the
// URDF's origins puts it (worked by hand in arm6.urdf's header comment):
// (0.71, 0, 1.96) m, with its z axis pointing down, x along +x, y along -y.
func TestDemoArmHome(t *testing.T) {
	c := loadTestChain(t, demoArmPath, "base_link", "flange")
	names := []string{"j1", "j2", "j3", "j4", "j5", "j6"}
	if c.NumJoints() != len(names) {
		t.Fatalf("%d movable joints, want 6", c.NumJoints())
	}
	for i, j := range c.Joints() {
		if j.Name != names[i] || j.Kind != Revolute {
			t.Errorf("joint %d is %s (%v), want revolute %s", i, j.Name, j.Kind, names[i])
		}
		if !(j.Lower < 0 && 0 < j.Upper) {
			t.Errorf("%s: home 0 outside limits [%v, %v]", j.Name, j.Lower, j.Upper)
		}
		if j.VelocityLimit < 1.5 || j.VelocityLimit > 3 {
			t.Errorf("%s: velocity limit %v outside 1.5–3 rad/s (our design range for this arm)", j.Name, j.VelocityLimit)
		}
	}
	ws := c.NewWorkspace()
	tip := c.Forward(ws, Identity(), make([]float64, 6))
	// Sums of decimal lengths, each within a few ulps.
	if d := maxAbsDiff3(tip.P, [3]float64{0.71, 0, 1.96}); d > 1e-14 {
		t.Errorf("home flange at %v, want (0.71, 0, 1.96)", tip.P)
	}
	if d := maxAbsDiff9(tip.R, [9]float64{1, 0, 0, 0, -1, 0, 0, 0, -1}); d > 1e-15 {
		t.Errorf("home flange rotation %v, want diag(1, -1, -1)", tip.R)
	}
}

// TestDemoArmSingleJointMoves: turning one joint by θ from home rotates
// everything after it rigidly about that joint's axis, so a bar point p
// moves to o + R(ω, θ)·(p − o). The axes ω and points o are read off the
// URDF by hand (arm6.urdf's header comment), not from the code.
func TestDemoArmSingleJointMoves(t *testing.T) {
	c := loadTestChain(t, demoArmPath, "base_link", "flange")
	ws := c.NewWorkspace()
	pTip := [3]float64{0.30, 0, 0.05} // a bar point: 0.30 m along flange x, 0.05 m below it
	// At home the flange frame is at (0.71, 0, 1.96) with R = diag(1,-1,-1).
	home := [3]float64{0.71 + 0.30, 0, 1.96 - 0.05}
	axes := []struct {
		w, o [3]float64
	}{
		{[3]float64{0, 0, 1}, [3]float64{0, 0, 1.15}},     // j1 yaw
		{[3]float64{0, 1, 0}, [3]float64{0.15, 0, 1.40}},  // j2 shoulder
		{[3]float64{0, 1, 0}, [3]float64{0.15, 0, 1.98}},  // j3 elbow
		{[3]float64{1, 0, 0}, [3]float64{0.43, 0, 2.08}},  // j4 wrist roll
		{[3]float64{0, 1, 0}, [3]float64{0.71, 0, 2.08}},  // j5 wrist pitch
		{[3]float64{0, 0, -1}, [3]float64{0.71, 0, 2.00}}, // j6 flange roll (z down)
	}
	q := make([]float64, 6)
	c.Forward(ws, Identity(), q)
	if d := maxAbsDiff3(ws.Point(pTip), home); d > 1e-14 {
		t.Fatalf("bar point at home %v, want %v", ws.Point(pTip), home)
	}
	for i, a := range axes {
		for _, theta := range []float64{-0.9, 0.7} {
			for k := range q {
				q[k] = 0
			}
			q[i] = theta
			c.Forward(ws, Identity(), q)
			r := AxisAngle(a.w, theta)
			v := rotApply(&r, [3]float64{home[0] - a.o[0], home[1] - a.o[1], home[2] - a.o[2]})
			want := [3]float64{a.o[0] + v[0], a.o[1] + v[1], a.o[2] + v[2]}
			if d := maxAbsDiff3(ws.Point(pTip), want); d > 1e-14 {
				t.Errorf("j%d = %v: bar point %v, want %v", i+1, theta, ws.Point(pTip), want)
			}
			if d := maxAbsDiff3(ws.JointAxis(i), a.w); d > 1e-15 {
				t.Errorf("j%d axis %v, want %v", i+1, ws.JointAxis(i), a.w)
			}
			if d := maxAbsDiff3(ws.JointOrigin(i), a.o); d > 1e-14 {
				t.Errorf("j%d origin %v, want %v", i+1, ws.JointOrigin(i), a.o)
			}
			// The tip is the last joint's moved frame times the fixed offset.
			tip := ws.JointFrame(5).Mul(c.TipOffset())
			if d := maxAbsDiff3(ws.Tip().P, tip.P) + maxAbsDiff9(ws.Tip().R, tip.R); d > 1e-15 {
				t.Errorf("j%d: Tip() differs from JointFrame(5)·TipOffset() by %g", i+1, d)
			}
		}
	}
}

// TestChainErrors: absent or ill-posed chains are refused with the file and
// the tip link's line.
func TestChainErrors(t *testing.T) {
	u, err := ParseURDF(demoArmPath, readTestFile(t, demoArmPath))
	if err != nil {
		t.Fatal(err)
	}
	lineOfLink := func(name string) int {
		for _, l := range u.Links {
			if l.Name == name {
				return l.Line
			}
		}
		t.Fatalf("no link %s", name)
		return 0
	}
	for _, tc := range []struct {
		base, tip string
		line      int
		field     string
		msg       string
	}{
		{"base_link", "gripper", 0, "link[gripper]", `no link named "gripper"`},
		{"forearm_camera", "flange", lineOfLink("flange"), "link[flange]", "not below base link"},
		{"flange", "base_link", lineOfLink("base_link"), "link[base_link]", "not below base link"},
		{"flange", "flange", lineOfLink("flange"), "link[flange]", "the same link"},
		{"base_link", "riser", lineOfLink("riser"), "link[riser]", "is fixed"},
	} {
		_, err := u.Chain(tc.base, tc.tip)
		var fe *FileError
		if !errors.As(err, &fe) {
			t.Errorf("Chain(%s, %s): error %v is not a *FileError", tc.base, tc.tip, err)
			continue
		}
		if fe.File != demoArmPath || fe.Line != tc.line || fe.Field != tc.field || !strings.Contains(fe.Msg, tc.msg) {
			t.Errorf("Chain(%s, %s) = %q (line %d, field %q); want line %d, field %q, message with %q",
				tc.base, tc.tip, fe, fe.Line, fe.Field, tc.line, tc.field, tc.msg)
		}
	}
}

// TestChainSkipsSideBranches: the camera branch on the forearm must not
// change the chain, and a chain may start and end anywhere in the tree.
func TestChainSkipsSideBranches(t *testing.T) {
	u, err := ParseURDF(demoArmPath, readTestFile(t, demoArmPath))
	if err != nil {
		t.Fatal(err)
	}
	c, err := u.Chain("turret", "wrist_pitch")
	if err != nil {
		t.Fatal(err)
	}
	if c.NumJoints() != 4 || c.Joint(0).Name != "j2" || c.Joint(3).Name != "j5" {
		t.Errorf("turret→wrist_pitch: %v, want j2…j5", c.Joints())
	}
	if c.JointIndex("j4") != 2 || c.JointIndex("j1") != -1 {
		t.Errorf("JointIndex: j4 at %d (want 2), j1 at %d (want -1)", c.JointIndex("j4"), c.JointIndex("j1"))
	}
	cam, err := u.Chain("base_link", "forearm_camera")
	if err != nil {
		t.Fatal(err)
	}
	if cam.NumJoints() != 3 {
		t.Errorf("base_link→forearm_camera has %d joints, want 3 (j1, j2, j3)", cam.NumJoints())
	}
}

// TestChainHotPathAllocatesNothing: Forward, Point and PointJacobian run in
// the workspace without allocating (DESIGN §3).
func TestChainHotPathAllocatesNothing(t *testing.T) {
	c := loadTestChain(t, demoArmPath, "base_link", "flange")
	ws := c.NewWorkspace()
	q := []float64{0.1, -0.2, 0.3, -0.4, 0.5, -0.6}
	jac := make([]float64, 18)
	base := PoseFromXYZRPY([3]float64{0, 0.6, 0}, [3]float64{0, 0, 0.1})
	var sink float64
	allocs := testing.AllocsPerRun(100, func() {
		c.Forward(ws, base, q)
		p := ws.Point([3]float64{0.3, 0, 0.05})
		ws.PointJacobian(jac, [3]float64{0.3, 0, 0.05})
		sink += p[0] + jac[0]
	})
	if allocs != 0 {
		t.Errorf("Forward+Point+PointJacobian allocate %v times per run, want 0", allocs)
	}
	_ = sink
}

// TestChainMisusePanics: shape misuse panics (gonum style).
func TestChainMisusePanics(t *testing.T) {
	c := loadTestChain(t, demoArmPath, "base_link", "flange")
	other := loadTestChain(t, planarPath, "base_link", "tip")
	ws := c.NewWorkspace()
	for name, f := range map[string]func(){
		"short q":              func() { c.Forward(ws, Identity(), make([]float64, 5)) },
		"other chain's ws":     func() { c.Forward(other.NewWorkspace(), Identity(), make([]float64, 6)) },
		"Point before Forward": func() { c.NewWorkspace().Point([3]float64{}) },
		"short dst": func() {
			c.Forward(ws, Identity(), make([]float64, 6))
			ws.PointJacobian(make([]float64, 17), [3]float64{})
		},
		"small stride": func() {
			c.Forward(ws, Identity(), make([]float64, 6))
			ws.PointJacobianStrided(make([]float64, 100), 5, [3]float64{})
		},
	} {
		func() {
			defer func() {
				if recover() == nil {
					t.Errorf("%s: no panic", name)
				}
			}()
			f()
		}()
	}
}

// TestPointJacobianStrided: the strided form writes the same block into a
// wider matrix and leaves everything else alone.
func TestPointJacobianStrided(t *testing.T) {
	c := loadTestChain(t, demoArmPath, "base_link", "flange")
	ws := c.NewWorkspace()
	c.Forward(ws, Identity(), []float64{0.3, 0.2, -0.5, 1, -0.7, 0.4})
	p := [3]float64{0.2, 0.1, 0.05}
	block := make([]float64, 18)
	ws.PointJacobian(block, p)
	const stride, col0 = 14, 5
	wide := make([]float64, 4*stride)
	for i := range wide {
		wide[i] = -7
	}
	ws.PointJacobianStrided(wide[stride+col0:], stride, p)
	for r := 0; r < 4; r++ {
		for k := 0; k < stride; k++ {
			want := -7.0
			if r >= 1 && k >= col0 && k < col0+6 {
				want = block[(r-1)*6+k-col0]
			}
			if wide[r*stride+k] != want {
				t.Errorf("wide[%d,%d] = %v, want %v", r, k, wide[r*stride+k], want)
			}
		}
	}
}

// BenchmarkDemoArmForwardJacobian: one arm's forward kinematics and one bar
// point's position and Jacobian, as the cell does per anchor.
func BenchmarkDemoArmForwardJacobian(b *testing.B) {
	c := loadTestChain(b, demoArmPath, "base_link", "flange")
	ws := c.NewWorkspace()
	q := []float64{0.1, -0.2, 0.3, -0.4, 0.5, -0.6}
	jac := make([]float64, 18)
	base := PoseFromXYZRPY([3]float64{0, 0.6, 0}, [3]float64{0, 0, 0.1})
	pTip := [3]float64{0.3, 0, 0.05}
	b.ReportAllocs()
	for b.Loop() {
		c.Forward(ws, base, q)
		ws.PointJacobian(jac, pTip)
	}
}

// TestChainRefusesUnsupportedJointsInHandBuiltURDF: a URDF value made in
// code (no parser positions) still cannot smuggle a floating, planar or
// mimic joint into a chain.
func TestChainRefusesUnsupportedJointsInHandBuiltURDF(t *testing.T) {
	for _, bad := range []URDFJoint{
		{Name: "j", Kind: Floating, Parent: "a", Child: "b", Origin: Identity()},
		{Name: "j", Kind: Planar, Parent: "a", Child: "b", Origin: Identity(), Axis: [3]float64{0, 0, 1}},
		{Name: "j", Kind: Revolute, Parent: "a", Child: "b", Origin: Identity(), Axis: [3]float64{0, 0, 1}, Lower: -1, Upper: 1, VelocityLimit: 1, Mimic: "k"},
		{Name: "j", Kind: JointKind(42), Parent: "a", Child: "b", Origin: Identity()},
	} {
		u := &URDF{File: "code", Links: []URDFLink{{Name: "a"}, {Name: "b"}}, Joints: []URDFJoint{bad}}
		_, err := u.Chain("a", "b")
		var fe *FileError
		if !errors.As(err, &fe) || fe.File != "code" || !strings.HasPrefix(fe.Field, "joint[j]") {
			t.Errorf("kind %v mimic %q: Chain error %v, want a *FileError about joint[j]", bad.Kind, bad.Mimic, err)
		}
	}
}
