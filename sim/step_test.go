package sim

import (
	"errors"
	"math"
	"math/rand/v2"
	"testing"
)

// oscillator is a bob of mass m on an axial rod of stiffness k and damping
// c below an anchored pivot at the origin, without gravity: along the rod
// axis the extension u obeys m·u″ = −k·u − c·u′ exactly (the rod law is
// linear along its axis while the rod is not inverted).
func oscillator(t testing.TB, mass, k, c, h float64) *Model {
	t.Helper()
	fig := &Figure{
		Nodes: []Node{
			{Name: "pivot", MassKg: 1, Anchored: true},
			{Name: "bob", MassKg: mass, PositionM: [3]float64{0, 0, -1}},
		},
		Rods: []Rod{{A: 0, B: 1, RestLengthM: 1, StiffnessNPerM: k, DampingNsPerM: c}},
	}
	m, err := NewModel(fig, nil, ModelSettings{StepS: h, NoGravity: true, GradTol: 1e-14})
	if err != nil {
		t.Fatal(err)
	}
	return m
}

// oscState is the oscillator state with extension u now and u − h·v one
// step ago.
func oscState(u, v, h float64) (xCur, xPrev []float64) {
	return []float64{0, 0, 0, 0, 0, -(1 + u)}, []float64{0, 0, 0, 0, 0, -(1 + u - h*v)}
}

// Backward Euler applied to y′ = Jy, y = (u, v), J = [[0, 1], [−ω², −c/m]]
// maps y to (I − hJ)⁻¹y; its stability function is R(z) = 1/(1 − z)
// (Hairer & Wanner, Solving Ordinary Differential Equations II, §IV.2).
// The step's one-step map, measured on the two basis states, must be that
// matrix, and its determinant the product of R(hλ) over the eigenvalues,
// 1/((1 + hc/m) + h²ω²) — for the undamped oscillator 1/(1 + ω²h²), the
// squared modulus of R(±iωh).
func TestOscillatorAmplificationFactor(t *testing.T) {
	for _, c := range []struct{ mass, k, damp, h float64 }{
		{1, 100, 0, 0.01},   // undamped, ωh = 0.1
		{1, 100, 0, 0.3},    // undamped, ωh = 3
		{1, 100, 2, 0.01},   // damped, ζ = 0.1
		{0.5, 400, 20, 0.1}, // heavily damped, ζ ≈ 0.71, ωh ≈ 2.8
	} {
		m := oscillator(t, c.mass, c.k, c.damp, c.h)
		ws := m.NewWorkspace()
		var got [2][2]float64
		for col, y := range [2][2]float64{{0.01, 0}, {0, 0.01}} {
			xCur, xPrev := oscState(y[0], y[1], c.h)
			xNext := make([]float64, 6)
			if err := m.Step(ws, xNext, xCur, xPrev, nil); err != nil {
				t.Fatal(err)
			}
			u := -xNext[5] - 1
			got[0][col] = u / 0.01
			got[1][col] = (u - y[0]) / c.h / 0.01
			if xNext[3] != 0 || xNext[4] != 0 {
				t.Errorf("the bob left the rod's axis: %v", xNext)
			}
		}
		w2, cm := c.k/c.mass, c.damp/c.mass
		det := (1 + c.h*cm) + c.h*c.h*w2
		want := [2][2]float64{{(1 + c.h*cm) / det, c.h / det}, {-c.h * w2 / det, 1 / det}}
		for i := range 2 {
			for j := range 2 {
				if math.Abs(got[i][j]-want[i][j]) > 1e-9*(1+math.Abs(want[i][j])) {
					t.Errorf("%+v: R[%d][%d] = %.12g, want %.12g", c, i, j, got[i][j], want[i][j])
				}
			}
		}
		gotDet := got[0][0]*got[1][1] - got[0][1]*got[1][0]
		if math.Abs(gotDet-1/det) > 1e-9 {
			t.Errorf("%+v: det R = %.12g, want %.12g", c, gotDet, 1/det)
		}
	}
}

// Backward Euler is first order (Hairer & Wanner II; any numerical-analysis
// text): halving h halves the global error at a fixed time. The exact
// solution of the damped oscillator is u(t) = e^{−ζωt}(u₀cos ω_d t +
// (v₀ + ζωu₀)/ω_d · sin ω_d t), ω_d = ω√(1 − ζ²). The ratio of errors is
// asymptotically 2; [1.8, 2.2] allows the higher-order remainder at these h.
func TestOscillatorFirstOrderConvergence(t *testing.T) {
	const (
		mass, k, damp = 1.0, 100.0, 0.4 // ω = 10 rad/s, ζ = 0.02
		u0, endS      = 0.01, 1.0
	)
	w := math.Sqrt(k / mass)
	zeta := damp / (2 * mass * w)
	wd := w * math.Sqrt(1-zeta*zeta)
	exact := func(t float64) float64 {
		return math.Exp(-zeta*w*t) * (u0*math.Cos(wd*t) + zeta*w*u0/wd*math.Sin(wd*t))
	}
	var errs []float64
	for _, h := range []float64{2e-3, 1e-3, 5e-4} {
		m := oscillator(t, mass, k, damp, h)
		ws := m.NewWorkspace()
		xPrev := []float64{0, 0, 0, 0, 0, -(1 + exact(-h))}
		xCur := []float64{0, 0, 0, 0, 0, -(1 + u0)}
		xNext := make([]float64, 6)
		steps := int(math.Round(endS / h))
		for range steps {
			if err := m.Step(ws, xNext, xCur, xPrev, nil); err != nil {
				t.Fatal(err)
			}
			xPrev, xCur, xNext = xCur, xNext, xPrev
		}
		errs = append(errs, math.Abs(-xCur[5]-1-exact(endS)))
	}
	for i := 1; i < len(errs); i++ {
		if r := errs[i-1] / errs[i]; r < 1.8 || r > 2.2 {
			t.Errorf("error ratio %.3f on halving h (errors %.3g), want ≈ 2 for first order", r, errs)
		}
	}
	t.Logf("global errors at t = 1 s for h = 2, 1, 0.5 ms: %.3g", errs)
}

// A 1 kg bob on a 1 m rod stiff enough (axial ω ≈ 316 rad/s) to act as a
// pendulum: its small-angle period is 2π√(L/g) (any mechanics text). At
// 0.05 rad the large-amplitude correction is 1 + θ²/16 ≈ 1.00016 and
// backward Euler's phase error (ωh)²/3 ≈ 3e-6, so 1% (the bound)
// has a wide margin; the measured error is logged.
func TestPendulumSmallAnglePeriod(t *testing.T) {
	const (
		h      = 1e-3
		theta0 = 0.05
	)
	fig := &Figure{
		Nodes: []Node{
			{Name: "pivot", MassKg: 1, PositionM: [3]float64{0, 0, 2}, Anchored: true},
			{Name: "bob", MassKg: 1, PositionM: [3]float64{0, 0, 1}},
		},
		Rods: []Rod{{A: 0, B: 1, RestLengthM: 1, StiffnessNPerM: 1e5}},
	}
	m, err := NewModel(fig, nil, ModelSettings{StepS: h})
	if err != nil {
		t.Fatal(err)
	}
	g := StandardGravityMPerS2
	l := 1 + g/1e5 // the rod stretched by the bob's weight
	x0 := []float64{0, 0, 2, l * math.Sin(theta0), 0, 2 - l*math.Cos(theta0)}
	xCur, xPrev, xNext := append([]float64(nil), x0...), append([]float64(nil), x0...), make([]float64, 6)
	ws := m.NewWorkspace()
	var crossings []float64
	for k := 0; len(crossings) < 4 && k < 20000; k++ {
		if err := m.Step(ws, xNext, xCur, xPrev, nil); err != nil {
			t.Fatal(err)
		}
		if xCur[3] > 0 && xNext[3] <= 0 { // downward crossing of x = 0, interpolated
			crossings = append(crossings, (float64(k)+xCur[3]/(xCur[3]-xNext[3]))*h)
		}
		xPrev, xCur, xNext = xCur, xNext, xPrev
	}
	if len(crossings) < 4 {
		t.Fatalf("only %d crossings", len(crossings))
	}
	period := (crossings[3] - crossings[0]) / 3
	want := 2 * math.Pi * math.Sqrt(1/g)
	if rel := math.Abs(period-want) / want; rel > 0.01 {
		t.Errorf("period %.5f s, want %.5f s (relative error %.2g > 1%%)", period, want, rel)
	} else {
		t.Logf("period %.6f s, 2π√(L/g) = %.6f s, relative error %.2g", period, want, rel)
	}
}

// Hooke's law: a mass hanging at rest on a spring stretches it by mg/k, on
// a string and on a rod. The rest pose's force tolerance (DefaultGradTolM ·
// m/h² = 1e-7 N) allows an axial position error of 1e-7 N / k = 1e-9 m
// (1e-8 m is asserted) and a sideways one of 1e-7 N over the sideways
// stiffness T/l ≈ 1.9 N/m, about 5e-8 m (1e-7 m is asserted).
func TestStaticExtensionHooke(t *testing.T) {
	const mass, k, restLen = 0.1, 100.0, 0.5
	g := StandardGravityMPerS2
	want := mass * g / k
	// On a string from an anchor at (0, 0, 1).
	fig := &Figure{Nodes: []Node{{Name: "weight", MassKg: mass, PositionM: [3]float64{0.01, 0, 0.6}}}}
	m, err := NewModel(fig, []StringLink{{Node: 0, RestLengthM: restLen, StiffnessNPerM: k}}, ModelSettings{StepS: 0.01})
	if err != nil {
		t.Fatal(err)
	}
	anchors := []float64{0, 0, 1}
	x := make([]float64, 3)
	ws := m.NewWorkspace()
	if err := m.RestPose(ws, x, anchors); err != nil {
		t.Fatal(err)
	}
	if ext := (1 - x[2]) - restLen; math.Abs(ext-want) > 1e-8 || math.Abs(x[0]) > 1e-7 {
		t.Errorf("string: extension %.10g m at x %.3g, want mg/k = %.10g m", ext, x[0], want)
	}
	if tension := m.StringTension(0, x, anchors); math.Abs(tension-mass*g) > 1e-6 {
		t.Errorf("string tension at rest %.9g N, want the weight %.9g N", tension, mass*g)
	}
	// At rest, a step with zero velocity stays at rest.
	xNext := make([]float64, 3)
	if err := m.Step(ws, xNext, x, x, anchors); err != nil {
		t.Fatal(err)
	}
	for i := range x {
		if math.Abs(xNext[i]-x[i]) > 1e-9 {
			t.Errorf("a step from rest moved the weight by %.3g m", xNext[i]-x[i])
		}
	}
	// On a rod from an anchored node.
	fig = &Figure{
		Nodes: []Node{
			{Name: "hook", MassKg: 1, PositionM: [3]float64{0, 0, 1}, Anchored: true},
			{Name: "weight", MassKg: mass, PositionM: [3]float64{0, 0.02, 0.45}},
		},
		Rods: []Rod{{A: 0, B: 1, RestLengthM: restLen, StiffnessNPerM: k, DampingNsPerM: 1}},
	}
	m, err = NewModel(fig, nil, ModelSettings{StepS: 0.01})
	if err != nil {
		t.Fatal(err)
	}
	x = make([]float64, 6)
	if err := m.RestPose(m.NewWorkspace(), x, nil); err != nil {
		t.Fatal(err)
	}
	if ext := (1 - x[5]) - restLen; math.Abs(ext-want) > 1e-8 || math.Abs(x[4]) > 1e-7 {
		t.Errorf("rod: extension %.10g m, want mg/k = %.10g m", ext, want)
	}
}

// A hanging chain settles to the catenary z = a·cosh(x/a) + const through
// the same end points with the same length, 2a·sinh(D/2a) = L (the
// classical result; any statics text). The figure is a chain of equal
// point masses (0.4 kg in all) on equal stiff rods — a discrete chain,
// whose nodes lie on the catenary only up to an O(link length²)
// discretisation error — with rods stiff enough (1e8 N/m; tension ≈ 3 N,
// strain ≈ 1e-6) that their stretch is negligible.
// So the check is twofold: the largest vertical distance of a node from
// the catenary is below 0.1% of the sag at 40 links, and it falls at
// least 3× (second order would be 4×) from 20 to 40 links.
func TestHangingChainIsCatenary(t *testing.T) {
	const span, length = 1.0, 1.5
	// Solve 2a·sinh(D/2a) = L for a by bisection.
	lo, hi := 0.01, 100.0
	for range 200 {
		a := (lo + hi) / 2
		if 2*a*math.Sinh(span/(2*a)) > length {
			lo = a
		} else {
			hi = a
		}
	}
	a := (lo + hi) / 2
	catenary := func(x float64) float64 { return a*math.Cosh(x/a) - a*math.Cosh(span/(2*a)) }
	sag := -catenary(0)
	dev := map[int]float64{}
	for _, links := range []int{20, 40} {
		fig := &Figure{}
		// Start from a V of the right length, far from the answer.
		depth := math.Sqrt(length*length/4 - span*span/4)
		for i := 0; i <= links; i++ {
			f := float64(i) / float64(links)
			x := -span/2 + f*span
			z := -depth * (1 - math.Abs(2*f-1))
			fig.Nodes = append(fig.Nodes, Node{Name: "n" + string(rune('a'+i%26)) + string(rune('a'+i/26)), MassKg: 0.4 / float64(links-1), PositionM: [3]float64{x, 0, z}, Anchored: i == 0 || i == links})
			if i > 0 {
				fig.Rods = append(fig.Rods, Rod{A: i - 1, B: i, RestLengthM: length / float64(links), StiffnessNPerM: 1e8})
			}
		}
		m, err := NewModel(fig, nil, ModelSettings{StepS: 0.01})
		if err != nil {
			t.Fatal(err)
		}
		x := make([]float64, m.Dim())
		if err := m.RestPose(m.NewWorkspace(), x, nil); err != nil {
			t.Fatal(err)
		}
		for i := 1; i < links; i++ {
			dev[links] = math.Max(dev[links], math.Abs(x[3*i+2]-catenary(x[3*i])))
		}
	}
	t.Logf("sag %.4f m; largest deviation from the catenary: %.3g m at 20 links, %.3g m at 40", sag, dev[20], dev[40])
	if dev[40] > 0.001*sag {
		t.Errorf("40-link chain is %.3g m from the catenary, more than 0.1%% of the sag %.3g m", dev[40], sag)
	}
	if dev[20] < 3*dev[40] {
		t.Errorf("deviation did not fall with the link length: %.3g m at 20 links, %.3g m at 40", dev[20], dev[40])
	}
}

// A stiff figure, ωh well above 2: explicit symplectic Euler is unstable
// for ωh > 2 and blows up, while backward Euler, being A-stable (Dahlquist
// 1963), stays bounded and its energy decays. Same model, same forces:
// symplectic Euler uses the model's own potential gradient.
func TestStiffFigureImplicitStaysBounded(t *testing.T) {
	m, anchors := puppetModel(t, ModelSettings{StepS: 0.03})
	// ω of the stiffest rod as an isolated two-mass spring: √(k(1/m_a + 1/m_b)).
	var omega float64
	for _, r := range m.rods {
		omega = math.Max(omega, math.Sqrt(r.k*(1/m.mass[r.a]+1/m.mass[r.b])))
	}
	if omega*m.h < 5 {
		t.Fatalf("ωh = %.2g is not stiff; the check needs ωh well above 2", omega*m.h)
	}
	rest := make([]float64, m.Dim())
	ws := m.NewWorkspace()
	if err := m.RestPose(ws, rest, anchors); err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(7, 8))
	start, _ := randomMotion(m, rest, rng, 0.002, 0)
	const steps = 60
	// Symplectic Euler: v += h·(−∇U/m); x += h·v.
	x := append([]float64(nil), start...)
	v := make([]float64, len(x))
	grad := make([]float64, len(x))
	var blowup float64
	for range steps {
		m.incremental(grad, x, m.newStepInputs(x, x, anchors), m.h, hessNone, nil, nil) // at x = x_t = y this is ∇U
		for i := range x {
			v[i] -= m.h * grad[i] / m.mass[i/3]
			x[i] += m.h * v[i]
		}
		for i := range x {
			blowup = math.Max(blowup, math.Abs(x[i]-rest[i]))
		}
	}
	if !(blowup > 1e3) { // started within 2 mm
		t.Errorf("symplectic Euler at ωh = %.1f stayed within %.3g m; expected it to diverge", omega*m.h, blowup)
	}
	// Backward Euler from the same start.
	xPrev, xCur, xNext := append([]float64(nil), start...), append([]float64(nil), start...), make([]float64, len(start))
	kin, pot := m.Energy(xCur, xPrev, anchors)
	last := kin + pot
	var worst float64
	for k := range steps {
		if err := m.Step(ws, xNext, xCur, xPrev, anchors); err != nil {
			t.Fatal(err)
		}
		kin, pot = m.Energy(xNext, xCur, anchors)
		if kin+pot > last+1e-12 {
			t.Errorf("step %d: energy rose from %.12g J to %.12g J", k, last, kin+pot)
		}
		last = kin + pot
		for i := range xNext {
			worst = math.Max(worst, math.Abs(xNext[i]-rest[i]))
		}
		xPrev, xCur, xNext = xCur, xNext, xPrev
	}
	// The energy bound above is the real check; this one only says the
	// motion stayed on the scale of the figure (about 0.45 m tall).
	if worst > 0.1 {
		t.Errorf("backward Euler wandered %.3g m from rest", worst)
	}
	t.Logf("ωh = %.1f: symplectic Euler reached %.3g m from rest, backward Euler at most %.3g m", omega*m.h, blowup, worst)
}

// With damping and no forcing (anchors fixed) the total energy never
// increases from step to step. Backward Euler dissipates energy on its own
// (its amplification factor is below 1 in modulus); the figure's drag and
// rod damping add to that. The allowance 1e-12 J is rounding.
func TestDampedEnergyNeverIncreases(t *testing.T) {
	m, anchors := puppetModel(t, ModelSettings{StepS: 0.005})
	rest := make([]float64, m.Dim())
	ws := m.NewWorkspace()
	if err := m.RestPose(ws, rest, anchors); err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(9, 10))
	xCur, xPrev := randomMotion(m, rest, rng, 0.01, 0.5)
	xNext := make([]float64, m.Dim())
	kin, pot := m.Energy(xCur, xPrev, anchors)
	first, last := kin+pot, kin+pot
	for k := range 400 {
		if err := m.Step(ws, xNext, xCur, xPrev, anchors); err != nil {
			t.Fatal(err)
		}
		kin, pot = m.Energy(xNext, xCur, anchors)
		if kin+pot > last+1e-12 {
			t.Errorf("step %d: energy rose by %.3g J", k, kin+pot-last)
		}
		last = kin + pot
		xPrev, xCur, xNext = xCur, xNext, xPrev
	}
	if !(last < first) {
		t.Errorf("energy did not decay: %.6g J → %.6g J", first, last)
	}
}

// NaN or Inf in a state or an anchor is an error value, never a panic and
// never NaN out; the destination is left as it was.
func TestStepRefusesNonFiniteInput(t *testing.T) {
	m, anchors := puppetModel(t, ModelSettings{})
	ws := m.NewWorkspace()
	x := make([]float64, m.Dim())
	m.InitialState(x)
	for _, bad := range []float64{math.NaN(), math.Inf(1), math.Inf(-1)} {
		for which := range 3 {
			xc, xp, an := append([]float64(nil), x...), append([]float64(nil), x...), append([]float64(nil), anchors...)
			[][]float64{xc, xp, an}[which][4] = bad
			xNext := make([]float64, m.Dim())
			for i := range xNext {
				xNext[i] = 7
			}
			err := m.Step(ws, xNext, xc, xp, an)
			if !errors.Is(err, ErrNotFinite) {
				t.Errorf("input %d = %v: got %v, want ErrNotFinite", which, bad, err)
			}
			for _, v := range xNext {
				if v != 7 {
					t.Fatalf("input %d = %v: the destination was written", which, bad)
				}
			}
		}
		an := append([]float64(nil), anchors...)
		an[1] = bad
		if err := m.RestPose(ws, x, an); !errors.Is(err, ErrNotFinite) {
			t.Errorf("RestPose with %v: got %v", bad, err)
		}
		r := m.NewRollout(4)
		ans := make([]float64, 4*len(anchors))
		for k := range 4 {
			copy(ans[k*len(anchors):], anchors)
		}
		ans[2*len(anchors)+1] = bad
		if err := r.Run(x, x, ans); !errors.Is(err, ErrNotFinite) {
			t.Errorf("Rollout.Run with %v at step 3: got %v", bad, err)
		}
	}
	// Huge but finite input that no step can follow: an error, not NaN.
	xc := append([]float64(nil), x...)
	xc[3] = 1e300
	xNext := make([]float64, m.Dim())
	if err := m.Step(ws, xNext, xc, x, anchors); err == nil {
		for _, v := range xNext {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				t.Fatalf("a step returned %v without an error", v)
			}
		}
	}
}

// A step that cannot converge within its iteration budget reports
// ErrNoConvergence and writes nothing.
func TestStepReportsNonConvergence(t *testing.T) {
	m, anchors := puppetModel(t, ModelSettings{MaxNewtonIters: 1, GradTol: 1e-14})
	x := make([]float64, m.Dim())
	m.InitialState(x)
	xc := append([]float64(nil), x...)
	xc[0] += 0.05 // pull the head 5 cm sideways
	xNext := make([]float64, m.Dim())
	err := m.Step(m.NewWorkspace(), xNext, xc, x, anchors)
	if !errors.Is(err, ErrNoConvergence) {
		t.Fatalf("got %v, want ErrNoConvergence", err)
	}
	for _, v := range xNext {
		if v != 0 {
			t.Fatal("the destination was written")
		}
	}
	// A figure hanging from nothing has no rest pose.
	fig := &Figure{Nodes: []Node{{Name: "stone", MassKg: 1}}}
	free, _ := NewModel(fig, nil, ModelSettings{StepS: 0.01})
	if err := free.RestPose(free.NewWorkspace(), make([]float64, 3), nil); !errors.Is(err, ErrNoConvergence) {
		t.Errorf("a falling stone found a rest pose: %v", err)
	}
}

// Step, Sensitivity, SensitivityMatrices, Rollout.Run and Rollout.Tangent
// allocate nothing once sized.
func TestHotPathAllocatesNothing(t *testing.T) {
	m, anchors := puppetModel(t, ModelSettings{})
	ws := m.NewWorkspace()
	rest := make([]float64, m.Dim())
	if err := m.RestPose(ws, rest, anchors); err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(11, 12))
	xCur, xPrev := randomMotion(m, rest, rng, 0.002, 0.05)
	xNext := make([]float64, m.Dim())
	step := func() {
		if err := m.Step(ws, xNext, xCur, xPrev, anchors); err != nil {
			t.Fatal(err)
		}
	}
	if a := testing.AllocsPerRun(20, step); a != 0 {
		t.Errorf("Step: %v allocations per call", a)
	}
	dir := make([]float64, m.Dim())
	if a := testing.AllocsPerRun(20, func() { ws.Sensitivity(dir, xCur, xPrev, anchors) }); a != 0 {
		t.Errorf("Sensitivity: %v allocations per call", a)
	}
	dCur, dPrev, dAn := newDense(m.Dim(), m.Dim()), newDense(m.Dim(), m.Dim()), newDense(m.Dim(), 3*m.NumAnchors())
	if a := testing.AllocsPerRun(20, func() { ws.SensitivityMatrices(dCur, dPrev, dAn) }); a != 0 {
		t.Errorf("SensitivityMatrices: %v allocations per call", a)
	}
	const steps, k = 10, 24
	r := m.NewRollout(steps)
	ans := make([]float64, steps*len(anchors))
	for s := range steps {
		copy(ans[s*len(anchors):], anchors)
	}
	run := func() {
		if err := r.Run(xCur, xPrev, ans); err != nil {
			t.Fatal(err)
		}
	}
	if a := testing.AllocsPerRun(5, run); a != 0 {
		t.Errorf("Rollout.Run: %v allocations per call", a)
	}
	dX := make([]*denseT, steps)
	dA := make([]*denseT, steps)
	for s := range steps {
		dX[s] = newDense(m.Dim(), k)
		dA[s] = newDense(3*m.NumAnchors(), k)
		for j := range k {
			dA[s].Set(j%(3*m.NumAnchors()), j, 1)
		}
	}
	dX0 := newDense(m.Dim(), k)
	if a := testing.AllocsPerRun(5, func() { r.Tangent(dX, dX0, nil, dA) }); a != 0 {
		t.Errorf("Rollout.Tangent: %v allocations per call", a)
	}
}

// When the exact Hessian is indefinite — here a rod squeezed to a fifth of
// its length, with a long step so M/h² cannot make up for the negative
// transverse term k(1 − L/l) — Newton's directions come from the
// projected Hessian, and the step still converges, to the rod back near
// its rest length.
func TestStepFromIndefiniteStart(t *testing.T) {
	fig := &Figure{
		Nodes: []Node{
			{Name: "a", MassKg: 0.01, PositionM: [3]float64{0, 0, 0}},
			{Name: "b", MassKg: 0.01, PositionM: [3]float64{0.2, 0.01, 0}},
		},
		Rods: []Rod{{A: 0, B: 1, RestLengthM: 1, StiffnessNPerM: 1000}},
	}
	m, err := NewModel(fig, nil, ModelSettings{StepS: 1, NoGravity: true})
	if err != nil {
		t.Fatal(err)
	}
	x := make([]float64, 6)
	m.InitialState(x)
	ws := m.NewWorkspace()
	// The premise: the exact Hessian at the start is indefinite.
	m.loadStates(ws, x, x)
	var h bandMatrix
	h.reset(6, m.kd)
	m.incremental(make([]float64, 6), x, &ws.in, m.h, hessExact, &h, nil)
	if h.factorize() {
		t.Fatal("the exact Hessian at the start is positive definite; the test needs an indefinite one")
	}
	xNext := make([]float64, 6)
	if err := m.Step(ws, xNext, x, x, nil); err != nil {
		t.Fatalf("step from a squeezed rod: %v", err)
	}
	l := math.Sqrt(math.Pow(xNext[3]-xNext[0], 2) + math.Pow(xNext[4]-xNext[1], 2) + math.Pow(xNext[5]-xNext[2], 2))
	// With h = 1 s the inertia term holds the rod 2m/(kh²) ≈ 2e-5 short
	// of its rest length at most; 1e-3 m is a loose bound for "near".
	if math.Abs(l-1) > 1e-3 {
		t.Errorf("rod length after the step %.6f m, want about 1 m", l)
	}
}

// A weight dropped onto a slack string goes taut and slack again many
// times, crossing the tension ramp each time: every step must converge,
// and since this potential is convex (gravity is linear; φ is convex and
// non-decreasing, |x − a| convex) backward Euler's energy can only fall
// (the dissipation argument from U(x_t) ≥ U(x⁺) + ∇U(x⁺)·(x_t − x⁺)).
func TestWeightBouncingOnStringConverges(t *testing.T) {
	fig := &Figure{Nodes: []Node{{Name: "weight", MassKg: 0.05, PositionM: [3]float64{0, 0, 0.6}}}}
	m, err := NewModel(fig, []StringLink{{Node: 0, RestLengthM: 0.5, StiffnessNPerM: 2000}}, ModelSettings{StepS: 0.002})
	if err != nil {
		t.Fatal(err)
	}
	anchors := []float64{0, 0, 1}
	// Start 0.1 m above the string's reach, moving sideways and up.
	xCur, xPrev := []float64{0, 0, 0.6}, []float64{-0.002 * 0.1, 0, 0.6 - 0.002*0.3}
	xNext := make([]float64, 3)
	ws := m.NewWorkspace()
	kin, pot := m.Energy(xCur, xPrev, anchors)
	last := kin + pot
	taut, slack, catches := 0, 0, 0
	wasTaut := false
	for k := range 1500 {
		if err := m.Step(ws, xNext, xCur, xPrev, anchors); err != nil {
			t.Fatalf("step %d: %v", k, err)
		}
		kin, pot = m.Energy(xNext, xCur, anchors)
		if kin+pot > last+1e-12 {
			t.Errorf("step %d: energy rose by %.3g J", k, kin+pot-last)
		}
		last = kin + pot
		isTaut := m.StringTension(0, xNext, anchors) > 0
		if isTaut {
			taut++
		} else {
			slack++
		}
		if isTaut && !wasTaut {
			catches++
		}
		wasTaut = isTaut
		xPrev, xCur, xNext = xCur, xNext, xPrev
	}
	if taut < 50 || slack < 50 || catches < 3 {
		t.Errorf("the weight did not bounce: %d taut steps, %d slack, caught %d times", taut, slack, catches)
	}
	t.Logf("%d taut steps, %d slack, the string caught the weight %d times", taut, slack, catches)
}
