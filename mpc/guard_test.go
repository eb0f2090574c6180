package mpc

import (
	"encoding/binary"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
)

// The checks here are independent of the guard's closed forms: the checker
// tests the four bounds as DESIGN §4.5 states them and tests viability by
// simulating the hardest braking step by step, not with the formula G(Δ).

// guardTol is the slack allowed on velocity, acceleration and viability
// (positions are checked exactly). The guard rounds a handful of float64
// operations on positions of magnitude `scale` (≤ 64 ulp, see guardRoundingSlack),
// and the checker's braking simulation adds one rounding per simulated step
// (at most maxBrakeSteps). 1e-11·scale is above both by two orders of
// magnitude and far below the smallest acceleration step da used in the
// tests (≥ 1e-7), so any real violation is still caught.
func guardTol(b JointBounds) float64 {
	scale := 1.0
	if !math.IsInf(b.Lower, 0) {
		scale = math.Max(scale, math.Abs(b.Lower))
	}
	if !math.IsInf(b.Upper, 0) {
		scale = math.Max(scale, math.Abs(b.Upper))
	}
	return 1e-11 * scale
}

const maxBrakeSteps = 200000

// checkTarget returns an error naming the first bound that q = q_t breaks
// after the history p2 = q_{t−2}, p = q_{t−1}.
func checkGuardTarget(b JointBounds, periodS, q, p, p2 float64) error {
	tol := guardTol(b)
	if math.IsNaN(q) || math.IsInf(q, 0) {
		return fmt.Errorf("target %v not finite", q)
	}
	if q < b.Lower || q > b.Upper {
		return fmt.Errorf("position %v outside [%v, %v]", q, b.Lower, b.Upper)
	}
	if math.Abs(q-p) > b.MaxVelocity*periodS+tol {
		return fmt.Errorf("velocity: |q−p| = %v > %v", math.Abs(q-p), b.MaxVelocity*periodS)
	}
	if math.Abs(q-2*p+p2) > b.MaxAccel*periodS*periodS+tol {
		return fmt.Errorf("accel: |q−2p+p2| = %v > %v", math.Abs(q-2*p+p2), b.MaxAccel*periodS*periodS)
	}
	return checkGuardViable(b, periodS, q, q-p)
}

// checkViable simulates braking at MaxAccel from position q moving step per
// tick and reports whether the joint passes a limit before it is at rest.
func checkGuardViable(b JointBounds, periodS, q, step float64) error {
	tol := guardTol(b)
	da := b.MaxAccel * periodS * periodS
	pos := q
	for k := 0; step != 0; k++ {
		if k > maxBrakeSteps {
			return fmt.Errorf("braking did not end in %d steps", maxBrakeSteps)
		}
		switch {
		case step > da:
			step -= da
		case step < -da:
			step += da
		default:
			step = 0
		}
		pos += step
		if pos > b.Upper+tol || pos < b.Lower-tol {
			return fmt.Errorf("viability: braking from %v reaches %v, outside [%v, %v]", q, pos, b.Lower, b.Upper)
		}
	}
	return nil
}

// viableHistory reports whether (p2, p) is a history the guard promises to
// keep in bounds: p in bounds, speed within the limit, and viable.
func viableGuardHistory(b JointBounds, periodS, p, p2 float64) bool {
	if math.IsNaN(p) || math.IsNaN(p2) || math.IsInf(p, 0) || math.IsInf(p2, 0) {
		return false
	}
	if p < b.Lower || p > b.Upper || math.Abs(p-p2) > b.MaxVelocity*periodS {
		return false
	}
	return checkGuardViable(b, periodS, p, p-p2) == nil
}

func randomGuardBounds(rng *rand.Rand, name string) JointBounds {
	b := JointBounds{
		Name:        name,
		MaxVelocity: 0.1 + 3*rng.Float64(),
		MaxAccel:    1 + 49*rng.Float64(),
	}
	switch rng.IntN(6) {
	case 0: // continuous joint
		b.Lower, b.Upper = math.Inf(-1), math.Inf(1)
	case 1: // narrow range: viability acts almost everywhere
		b.Lower = -1 + rng.Float64()
		b.Upper = b.Lower + 0.01*rng.Float64()
	default:
		b.Lower = -3 * rng.Float64()
		b.Upper = b.Lower + 0.05 + 6*rng.Float64()
	}
	return b
}

// randomViableState draws a history (p2, p) that viableHistory accepts,
// often on the viability boundary, where the guard is most delicate.
func randomViableGuardState(rng *rand.Rand, b JointBounds, periodS float64) (p, p2 float64) {
	dv := b.MaxVelocity * periodS
	for {
		step := (2*rng.Float64() - 1) * dv
		lo, hi := b.Lower, b.Upper
		if math.IsInf(lo, -1) {
			lo = -5
		}
		if math.IsInf(hi, 1) {
			hi = 5
		}
		p = lo + (hi-lo)*rng.Float64()
		if rng.IntN(3) == 0 && !math.IsInf(b.Upper, 1) && step > 0 {
			// Push p up until braking just reaches the upper limit.
			p = b.Upper - guardBrakeDistance(step, b.MaxAccel*periodS*periodS)
		}
		p2 = p - step
		if viableGuardHistory(b, periodS, p, p2) {
			return p, p2
		}
	}
}

// brakeDistance sums the braking steps after step (the checker's way).
func guardBrakeDistance(step, da float64) float64 {
	d := 0.0
	for step > da {
		step -= da
		d += step
	}
	return d
}

func randomGuardWish(rng *rand.Rand, b JointBounds, p float64) float64 {
	switch rng.IntN(12) {
	case 0:
		return math.NaN()
	case 1:
		return math.Inf(1)
	case 2:
		return math.Inf(-1)
	case 3:
		return 1e300 * (2*rng.Float64() - 1)
	case 4:
		return p // hold
	case 5: // run at the upper limit
		if math.IsInf(b.Upper, 1) {
			return p + 10
		}
		return b.Upper + 1
	case 6:
		if math.IsInf(b.Lower, -1) {
			return p - 10
		}
		return b.Lower - 1
	case 7, 8:
		return p + (2*rng.Float64()-1)*b.MaxVelocity*0.02
	default:
		return p + (2*rng.Float64()-1)*0.5
	}
}

// TestGuardKeepsEveryBound runs random joints from random viable histories
// through thousands of ticks of random wishes (NaN, ±Inf and 1e300
// included) and checks every output independently. Expected: zero
// violations (DESIGN §4.5; the proof is in the comment at the top of
// guard.go).
func TestGuardKeepsEveryBound(t *testing.T) {
	rng := rand.New(rand.NewPCG(4, 5))
	periods := []float64{0.001, 0.004, 0.01, 0.05}
	const joints, ticks, runs = 6, 2000, 12
	violations, acted := 0, BoundKind(0)
	for run := range runs {
		periodS := periods[run%len(periods)]
		bounds := make([]JointBounds, joints)
		for j := range bounds {
			bounds[j] = randomGuardBounds(rng, fmt.Sprintf("j%d", j))
		}
		g, err := NewGuard(bounds, periodS)
		if err != nil {
			t.Fatal(err)
		}
		prev, prev2 := make([]float64, joints), make([]float64, joints)
		for j := range bounds {
			prev[j], prev2[j] = randomViableGuardState(rng, bounds[j], periodS)
		}
		wish, dst := make([]float64, joints), make([]float64, joints)
		var rep GuardReport
		for tick := range ticks {
			for j := range wish {
				wish[j] = randomGuardWish(rng, bounds[j], prev[j])
			}
			g.Apply(dst, wish, prev, prev2, &rep)
			acted |= rep.Any
			for j := range dst {
				if err := checkGuardTarget(bounds[j], periodS, dst[j], prev[j], prev2[j]); err != nil {
					violations++
					if violations < 5 {
						t.Errorf("run %d tick %d joint %d %+v: wish %v: %v", run, tick, j, bounds[j], wish[j], err)
					}
				}
				if rep.Acted[j]&BoundHistory != 0 {
					t.Errorf("run %d tick %d joint %d %+v: history flagged although it came from the guard: p2 %.17g p %.17g wish %v q %.17g", run, tick, j, bounds[j], prev2[j], prev[j], wish[j], dst[j])
				}
				notFinite := math.IsNaN(wish[j]) || math.IsInf(wish[j], 0)
				if notFinite != (rep.Acted[j]&BoundNotFinite != 0) {
					t.Errorf("run %d tick %d joint %d: wish %v but report %v", run, tick, j, wish[j], rep.Acted[j])
				}
			}
			copy(prev2, prev)
			copy(prev, dst)
		}
	}
	if violations != 0 {
		t.Fatalf("%d bound violations", violations)
	}
	// Every kind of bound must have acted at least once, or the test did
	// not exercise the guard.
	for k := BoundPosition; k <= BoundNotFinite; k <<= 1 {
		if acted&k == 0 {
			t.Errorf("bound %v never acted in the random runs", k)
		}
	}
}

// TestGuardReportNamesTheBound builds, for each bound, a history and wish
// that break that bound (and, where possible, only that one).
func TestGuardReportNamesTheBound(t *testing.T) {
	// Hand-made numbers; each expected target follows from DESIGN §4.5's
	// inequalities by arithmetic written beside it.
	const periodS = 0.01
	cases := []struct {
		name       string
		b          JointBounds
		p2, p      float64
		wish       float64
		want       BoundKind
		wantTarget float64 // NaN: not checked
	}{
		{
			// dv = 0.01, da = 1: only the velocity bound is broken; target
			// p + dv.
			name: "velocity", b: JointBounds{Lower: -10, Upper: 10, MaxVelocity: 1, MaxAccel: 1e4},
			p2: 0, p: 0, wish: 0.02, want: BoundVelocity, wantTarget: 0.01,
		},
		{
			// dv = 0.01, da = 1e-4: from rest the step may be da.
			name: "accel", b: JointBounds{Lower: -10, Upper: 10, MaxVelocity: 1, MaxAccel: 1},
			p2: 0, p: 0, wish: 0.005, want: BoundAccel, wantTarget: 1e-4,
		},
		{
			// Step 0.005 with da = 1e-4: braking reaches G(0.005) =
			// 51·(0.005 − 50·1e-4/2) = 0.1275 past p2, exactly the upper
			// limit. Keeping the speed breaks viability only; the largest
			// viable step is the braking step 0.005 − 1e-4 = 0.0049.
			name: "viability", b: JointBounds{Lower: -10, Upper: 0.1275, MaxVelocity: 1, MaxAccel: 1},
			p2: 0, p: 0.005, wish: 0.01, want: BoundViability, wantTarget: 0.0099,
		},
		{
			// A wish past the limit also cannot stop before it, so
			// viability acts together with position.
			name: "position", b: JointBounds{Lower: 0, Upper: 1, MaxVelocity: 100, MaxAccel: 1e6},
			p2: 0.99, p: 0.99, wish: 1.001, want: BoundPosition | BoundViability, wantTarget: 1,
		},
		{
			// NaN: brake. Moving 0.004 per step with da = 1e-4 → 0.0039.
			name: "nan", b: JointBounds{Lower: -10, Upper: 10, MaxVelocity: 1, MaxAccel: 1},
			p2: 0, p: 0.004, wish: math.NaN(), want: BoundNotFinite, wantTarget: 0.0079,
		},
		{
			name: "+inf", b: JointBounds{Lower: -10, Upper: 10, MaxVelocity: 1, MaxAccel: 1},
			p2: 0, p: 0.004, wish: math.Inf(1), want: BoundNotFinite, wantTarget: 0.0079,
		},
		{
			// A history above the upper limit: nothing can satisfy every
			// bound; the target is within the position limits. Holding at
			// 1.2 also breaks position and viability.
			name: "history", b: JointBounds{Lower: 0, Upper: 1, MaxVelocity: 1, MaxAccel: 1},
			p2: 1.2, p: 1.2, wish: 1.2, want: BoundHistory | BoundPosition | BoundViability, wantTarget: 1,
		},
		{
			name: "none", b: JointBounds{Lower: 0, Upper: 1, MaxVelocity: 1, MaxAccel: 1},
			p2: 0.5, p: 0.5, wish: 0.50005, want: 0, wantTarget: 0.50005,
		},
	}
	for _, c := range cases {
		g, err := NewGuard([]JointBounds{c.b}, periodS)
		if err != nil {
			t.Fatal(err)
		}
		var rep GuardReport
		dst := []float64{0}
		g.Apply(dst, []float64{c.wish}, []float64{c.p}, []float64{c.p2}, &rep)
		if rep.Acted[0] != c.want {
			t.Errorf("%s: report %v, want %v", c.name, rep.Acted[0], c.want)
		}
		if rep.Any != rep.Acted[0] {
			t.Errorf("%s: Any %v differs from the only joint's %v", c.name, rep.Any, rep.Acted[0])
		}
		if !math.IsNaN(c.wantTarget) && math.Abs(dst[0]-c.wantTarget) > 1e-12 {
			t.Errorf("%s: target %.15g, want %.15g", c.name, dst[0], c.wantTarget)
		}
		if c.want&BoundHistory == 0 {
			if err := checkGuardTarget(c.b, periodS, dst[0], c.p, c.p2); err != nil {
				t.Errorf("%s: %v", c.name, err)
			}
		}
	}
}

// TestGuardStopTarget: from any viable moving state, StopTarget brings each
// joint to rest within ⌈|Δ|/da⌉ ticks (the braking sequence of the
// derivation), every target within bounds.
func TestGuardStopTarget(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 8))
	const periodS = 0.004
	for trial := range 200 {
		b := randomGuardBounds(rng, "j")
		g, err := NewGuard([]JointBounds{b}, periodS)
		if err != nil {
			t.Fatal(err)
		}
		p, p2 := randomViableGuardState(rng, b, periodS)
		da := b.MaxAccel * periodS * periodS
		limit := int(math.Ceil(math.Abs(p-p2)/da)) + 1
		prev, prev2, dst := []float64{p}, []float64{p2}, []float64{0}
		var rep GuardReport
		rest := false
		for tick := 0; tick <= limit; tick++ {
			g.StopTarget(dst, prev, prev2, &rep)
			if err := checkGuardTarget(b, periodS, dst[0], prev[0], prev2[0]); err != nil {
				t.Fatalf("trial %d tick %d: %v", trial, tick, err)
			}
			if rep.Any != 0 {
				t.Fatalf("trial %d tick %d: braking reported %v", trial, tick, rep.Any)
			}
			prev2[0], prev[0] = prev[0], dst[0]
			if prev[0] == prev2[0] {
				rest = true
				break
			}
		}
		if !rest {
			t.Errorf("trial %d: not at rest after %d ticks", trial, limit)
		}
	}
}

func TestNewGuardRejectsBadBounds(t *testing.T) {
	good := JointBounds{Name: "a1", Lower: -1, Upper: 1, MaxVelocity: 1, MaxAccel: 1}
	bad := []JointBounds{
		{Name: "a1", Lower: 1, Upper: -1, MaxVelocity: 1, MaxAccel: 1},
		{Name: "a1", Lower: math.NaN(), Upper: 1, MaxVelocity: 1, MaxAccel: 1},
		{Name: "a1", Lower: math.Inf(1), Upper: math.Inf(1), MaxVelocity: 1, MaxAccel: 1},
		{Name: "a1", Lower: -1, Upper: 1, MaxVelocity: 0, MaxAccel: 1},
		{Name: "a1", Lower: -1, Upper: 1, MaxVelocity: 1, MaxAccel: math.Inf(1)},
		{Name: "a1", Lower: -1, Upper: 1, MaxVelocity: 1, MaxAccel: -2},
	}
	if _, err := NewGuard([]JointBounds{good}, 0.004); err != nil {
		t.Fatalf("good bounds rejected: %v", err)
	}
	for i, b := range bad {
		if _, err := NewGuard([]JointBounds{b}, 0.004); err == nil {
			t.Errorf("case %d %+v accepted", i, b)
		}
	}
	if _, err := NewGuard([]JointBounds{good}, 0); err == nil {
		t.Error("zero period accepted")
	}
}

func TestGuardAllocatesNothing(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	bounds := make([]JointBounds, 12)
	for j := range bounds {
		bounds[j] = randomGuardBounds(rng, "j")
	}
	g, err := NewGuard(bounds, 0.004)
	if err != nil {
		t.Fatal(err)
	}
	wish, prev, prev2, dst := make([]float64, 12), make([]float64, 12), make([]float64, 12), make([]float64, 12)
	for j := range bounds {
		prev[j], prev2[j] = randomViableGuardState(rng, bounds[j], 0.004)
		wish[j] = prev[j] + 0.1
	}
	var rep GuardReport
	g.Apply(dst, wish, prev, prev2, &rep)
	allocs := testing.AllocsPerRun(100, func() {
		g.Apply(dst, wish, prev, prev2, &rep)
		g.StopTarget(dst, prev, prev2, &rep)
	})
	if allocs != 0 {
		t.Errorf("%v allocations per tick, want 0", allocs)
	}
}

func BenchmarkGuardApply12(b *testing.B) {
	rng := rand.New(rand.NewPCG(1, 2))
	bounds := make([]JointBounds, 12)
	for j := range bounds {
		bounds[j] = randomGuardBounds(rng, "j")
	}
	g, _ := NewGuard(bounds, 0.004)
	wish, prev, prev2, dst := make([]float64, 12), make([]float64, 12), make([]float64, 12), make([]float64, 12)
	for j := range bounds {
		prev[j], prev2[j] = randomViableGuardState(rng, bounds[j], 0.004)
		wish[j] = prev[j] + 0.1
	}
	var rep GuardReport
	b.ReportAllocs()
	for b.Loop() {
		g.Apply(dst, wish, prev, prev2, &rep)
	}
}

// FuzzGuard drives one joint from a fuzzed history with a fuzzed sequence
// of wishes (8 bytes each, read as raw float64 bits, so NaN, ±Inf,
// subnormals and huge values all occur). From a viable in-bounds history
// every output must pass checkGuardTarget and the history must never be
// flagged; from any other history the output must still be finite and
// within the position limits.
//
// Domain: the guard is defined for any valid bounds, but the checker needs
// its tolerance (1e-11 of the range) to be meaningful and its braking
// simulation to end, so bounds are limited to |limit| ≤ 100 (or infinite),
// periods to [1e-4, 0.1] s, speeds to [1e-3, 100], accelerations to
// [1e-2, 1e4] and braking to at most 1e5 ticks. Inputs outside it return
// without a check.
func FuzzGuard(f *testing.F) {
	// Seeds; more are in testdata/fuzz/FuzzGuard and run with plain go test.
	f.Add(-1.0, 1.0, 2.0, 20.0, 0.004, 0.0, 0.0, []byte{})
	f.Add(0.0, 0.1275, 1.0, 1.0, 0.01, 0.005, 0.0, guardFuzzWishes(0.01, 0.02, math.Inf(1), math.NaN(), 1e300))
	f.Fuzz(func(t *testing.T, lower, upper, vmax, amax, periodS, p, p2 float64, wishes []byte) {
		b := JointBounds{Name: "fuzz", Lower: lower, Upper: upper, MaxVelocity: vmax, MaxAccel: amax}
		if !guardFuzzDomain(b, periodS) {
			return
		}
		g, err := NewGuard([]JointBounds{b}, periodS)
		if err != nil {
			t.Fatalf("bounds in the domain rejected: %v", err)
		}
		viable := viableGuardHistory(b, periodS, p, p2)
		prev, prev2, dst, wish := []float64{p}, []float64{p2}, []float64{0}, []float64{0}
		var rep GuardReport
		ticks := min(len(wishes)/8, 512)
		for k := 0; k < max(ticks, 1); k++ {
			wish[0] = math.NaN()
			if k < ticks {
				wish[0] = math.Float64frombits(binary.LittleEndian.Uint64(wishes[8*k:]))
			}
			g.Apply(dst, wish, prev, prev2, &rep)
			if viable {
				if err := checkGuardTarget(b, periodS, dst[0], prev[0], prev2[0]); err != nil {
					t.Fatalf("tick %d: history %v, %v; wish %v: %v", k, prev2[0], prev[0], wish[0], err)
				}
				if rep.Any&BoundHistory != 0 {
					t.Fatalf("tick %d: viable history flagged", k)
				}
			} else if !finiteGuard(dst[0]) || dst[0] < b.Lower || dst[0] > b.Upper {
				t.Fatalf("tick %d: from a broken history, target %v outside [%v, %v]", k, dst[0], b.Lower, b.Upper)
			}
			prev2[0], prev[0] = prev[0], dst[0]
		}
	})
}

func guardFuzzDomain(b JointBounds, periodS float64) bool {
	limitOK := func(x float64) bool { return math.IsInf(x, 0) || math.Abs(x) <= 100 }
	in := func(x, lo, hi float64) bool { return x >= lo && x <= hi }
	if !limitOK(b.Lower) || !limitOK(b.Upper) || math.IsInf(b.Lower, 1) || math.IsInf(b.Upper, -1) || !(b.Lower <= b.Upper) {
		return false
	}
	if !in(periodS, 1e-4, 0.1) || !in(b.MaxVelocity, 1e-3, 100) || !in(b.MaxAccel, 1e-2, 1e4) {
		return false
	}
	return b.MaxVelocity/(b.MaxAccel*periodS) <= 1e5
}

// guardFuzzWishes encodes wishes the way FuzzGuard reads them.
func guardFuzzWishes(w ...float64) []byte {
	out := make([]byte, 8*len(w))
	for i, x := range w {
		binary.LittleEndian.PutUint64(out[8*i:], math.Float64bits(x))
	}
	return out
}
