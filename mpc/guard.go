package mpc

import (
	"errors"
	"fmt"
	"math"
	"strings"
)

// The guard is the last thing between the planner and the arms. It is kept
// small so that it can be read in one sitting and checked by hand.
//
// # Discrete model
//
// Targets are sent every Δt. Write p₂ = q_{t−2}, p = q_{t−1}, q = q_t, the
// step Δ = q − p and the previous step Δₚ = p − p₂. With dv = v_max·Δt and
// da = a_max·Δt² the bounds on the next target are
//
//	position:      lower ≤ q ≤ upper
//	velocity:      |Δ| ≤ dv                 (|q − p|/Δt ≤ v_max)
//	acceleration:  |Δ − Δₚ| ≤ da            (|q − 2p + p₂|/Δt² ≤ a_max)
//
// # Viability, derived for the discrete dynamics
//
// A state (q, Δ) with Δ > 0 is viable towards the upper limit if braking as
// hard as the acceleration bound allows stops the joint at or below it. The
// hardest braking takes steps Δ − da, Δ − 2da, …, Δ − n·da and then 0, with
// n = ⌊Δ/da⌋ (the last non-negative term; the step to 0 after it changes the
// step by less than da, so it is allowed). The stopping distance is
//
//	S(Δ) = Σ_{k=1..n} (Δ − k·da) = n·Δ − da·n(n+1)/2,
//
// and the condition is q + S(Δ) ≤ upper, i.e. with room = upper − p:
//
//	G(Δ) = Δ + S(Δ) ≤ room.                                            (V⁺)
//
// On [n·da, (n+1)·da) G(Δ) = (n+1)(Δ − n·da/2): G is continuous, piecewise
// linear and strictly increasing, G(0) = 0 and G(n·da) = da·n(n+1)/2. So (V⁺)
// is the single upper bound Δ ≤ Δ⁺, where n is the largest integer with
// da·n(n+1)/2 ≤ room and Δ⁺ = room/(n+1) + n·da/2. The mirror image gives
// Δ ≥ −Δ⁻ from room⁻ = p − lower (V⁻). (This is the discrete counterpart of
// v² ≤ 2·a_max·distance; it reduces to it as Δt → 0.)
//
// # Why the admissible set is never empty
//
// Suppose the history is in bounds and viable: lower ≤ p ≤ upper, |Δₚ| ≤ dv,
// and p₂ → p satisfies (V⁺) and (V⁻) measured from p₂. Take the braking
// step Δₛ = sign(Δₚ)·max(|Δₚ| − da, 0). Then |Δₛ − Δₚ| ≤ da and |Δₛ| ≤ |Δₚ| ≤ dv.
// If Δₚ > da, Δₛ = Δₚ − da has n−1 braking terms left, so
// S(Δₛ) = S(Δₚ) − Δₛ and p + Δₛ + S(Δₛ) = p + S(Δₚ) = p₂ + G(Δₚ) ≤ upper:
// (V⁺) holds with equality carried over, exactly. If 0 ≤ Δₚ ≤ da, Δₛ = 0 and
// q = p, which is viable since p ≤ upper. (V⁻) holds because q ≥ p ≥ lower and
// Δₛ ≥ 0. The case Δₚ < 0 is the mirror image. Position holds since
// q ≤ q + S(Δₛ) ≤ upper. So Δₛ lies in every interval, the intersection
// [Δlo, Δhi] is non-empty, and the output q = p + clampGuard(Δwish, Δlo, Δhi) is
// in bounds and viable again: by induction every later tick is too, whatever
// the wishes were.
//
// # Floating point
//
// The intervals are computed in float64. Along a trajectory that rides the
// viability boundary the two sides of the intersection can cross by a few
// rounding errors. Then the guard takes the braking step Δₛ (admissible in
// exact arithmetic, see above) clamped into the position, viability and
// velocity intervals, which re-anchors viability to the actual position so
// rounding cannot accumulate along the boundary; only the acceleration bound
// may be missed, by the rounding gap, and the history is not flagged. The
// position bound is enforced exactly by a final clamp. Velocity, acceleration and
// viability hold to within a few units in the last place of the positions
// involved; the property tests state the tolerance.

// BoundKind is a bit set naming joint bounds.
type BoundKind uint8

const (
	// BoundPosition: the wish was outside [Lower, Upper].
	BoundPosition BoundKind = 1 << iota
	// BoundVelocity: the wish moved faster than MaxVelocity.
	BoundVelocity
	// BoundAccel: the wish accelerated harder than MaxAccel.
	BoundAccel
	// BoundViability: from the wish the joint could not stop before a
	// limit at MaxAccel.
	BoundViability
	// BoundNotFinite: the wish was NaN or ±Inf; the guard braked instead.
	BoundNotFinite
	// BoundHistory: the history given to the guard already broke a bound
	// (or was not finite), so no target could meet every bound. The guard
	// braked as hard as allowed and kept the position limits.
	BoundHistory
)

var boundKindNames = [...]string{"position", "velocity", "accel", "viability", "not-finite", "history"}

// String lists the bounds in the set, joined by "+", or "none".
func (k BoundKind) String() string {
	if k == 0 {
		return "none"
	}
	var b strings.Builder
	for i, name := range boundKindNames {
		if k&(1<<i) == 0 {
			continue
		}
		if b.Len() > 0 {
			b.WriteByte('+')
		}
		b.WriteString(name)
	}
	return b.String()
}

// JointBounds are the hard limits of one joint. Positions are in rad for
// revolute joints and m for prismatic ones; MaxVelocity is per s and MaxAccel
// per s². A continuous joint has Lower = −Inf and Upper = +Inf.
type JointBounds struct {
	Name         string
	Lower, Upper float64
	MaxVelocity  float64
	MaxAccel     float64
}

// GuardReport says which bounds acted on each joint in one call.
type GuardReport struct {
	// Acted[j] is the set of bounds the wish for joint j broke.
	Acted []BoundKind
	// Any is the union of Acted.
	Any BoundKind
}

// Guard turns wished joint targets into targets within every bound. It has
// no state besides its bounds; the caller passes the last two targets it
// sent. A Guard is safe for concurrent use because it is never modified.
type Guard struct {
	joints []guardJoint
}

type guardJoint struct {
	lower, upper float64
	dv, da       float64 // MaxVelocity·Δt and MaxAccel·Δt²
}

// NewGuard returns a guard for joints with the given bounds, for targets
// sent every periodS seconds.
func NewGuard(bounds []JointBounds, periodS float64) (*Guard, error) {
	if !(periodS > 0) || math.IsInf(periodS, 1) {
		return nil, fmt.Errorf("mpc: guard: tick period %v s must be positive and finite", periodS)
	}
	if len(bounds) == 0 {
		return nil, errors.New("mpc: guard: no joints")
	}
	g := &Guard{joints: make([]guardJoint, len(bounds))}
	for j, b := range bounds {
		name := b.Name
		if name == "" {
			name = fmt.Sprintf("#%d", j)
		}
		switch {
		case math.IsNaN(b.Lower) || math.IsNaN(b.Upper) || math.IsInf(b.Lower, 1) || math.IsInf(b.Upper, -1):
			return nil, fmt.Errorf("mpc: guard: joint %s: limits [%v, %v] must be numbers, lower may be -Inf and upper +Inf", name, b.Lower, b.Upper)
		case b.Lower > b.Upper:
			return nil, fmt.Errorf("mpc: guard: joint %s: lower limit %v is above upper limit %v", name, b.Lower, b.Upper)
		case !(b.MaxVelocity > 0) || math.IsInf(b.MaxVelocity, 1):
			return nil, fmt.Errorf("mpc: guard: joint %s: max velocity %v must be positive and finite", name, b.MaxVelocity)
		case !(b.MaxAccel > 0) || math.IsInf(b.MaxAccel, 1):
			return nil, fmt.Errorf("mpc: guard: joint %s: max acceleration %v must be positive and finite", name, b.MaxAccel)
		}
		g.joints[j] = guardJoint{
			lower: b.Lower,
			upper: b.Upper,
			dv:    b.MaxVelocity * periodS,
			da:    b.MaxAccel * periodS * periodS,
		}
		if g.joints[j].da == 0 || g.joints[j].dv == 0 {
			return nil, fmt.Errorf("mpc: guard: joint %s: limits times the period underflow to zero", name)
		}
	}
	return g, nil
}

// Joints returns the number of joints.
func (g *Guard) Joints() int { return len(g.joints) }

// Apply writes into dst the targets nearest to wish that satisfy every
// bound, given the last target sent (prev) and the one before it (prev2).
// If the history is in bounds and viable, so is the output, for every wish
// including NaN and ±Inf. rep may be nil. dst may alias wish. Apply panics if
// the slice lengths differ from the number of joints.
func (g *Guard) Apply(dst, wish, prev, prev2 []float64, rep *GuardReport) {
	g.checkLen(dst, prev, prev2)
	if len(wish) != len(g.joints) {
		panic("mpc: guard: wish length differs from the number of joints")
	}
	rep = resetGuardReport(rep, len(g.joints))
	for j := range g.joints {
		q, acted := g.joints[j].target(wish[j], prev[j], prev2[j], false)
		dst[j] = q
		if rep != nil {
			rep.Acted[j] = acted
			rep.Any |= acted
		}
	}
}

// StopTarget writes into dst the targets that brake every joint towards rest
// as hard as MaxAccel allows, within every bound. This is what the hold state
// sends. rep may be nil.
func (g *Guard) StopTarget(dst, prev, prev2 []float64, rep *GuardReport) {
	g.checkLen(dst, prev, prev2)
	rep = resetGuardReport(rep, len(g.joints))
	for j := range g.joints {
		q, acted := g.joints[j].target(0, prev[j], prev2[j], true)
		dst[j] = q
		if rep != nil {
			rep.Acted[j] = acted
			rep.Any |= acted
		}
	}
}

func (g *Guard) checkLen(dst, prev, prev2 []float64) {
	n := len(g.joints)
	if len(dst) != n || len(prev) != n || len(prev2) != n {
		panic("mpc: guard: slice length differs from the number of joints")
	}
}

func resetGuardReport(rep *GuardReport, n int) *GuardReport {
	if rep == nil {
		return nil
	}
	if cap(rep.Acted) < n {
		rep.Acted = make([]BoundKind, n)
	}
	rep.Acted = rep.Acted[:n]
	rep.Any = 0
	return rep
}

// target is the guard for one joint. With stop set the wish is ignored and
// the braking step is wished instead.
func (b *guardJoint) target(wish, p, p2 float64, stop bool) (float64, BoundKind) {
	if !finiteGuard(p) || !finiteGuard(p2) {
		// Nothing is known about the motion. Hold where we are if that is
		// known, else the point of the range nearest zero.
		if finiteGuard(p) {
			return clampGuard(p, b.lower, b.upper), BoundHistory
		}
		return clampGuard(0, b.lower, b.upper), BoundHistory
	}
	stepPrev := p - p2
	brake := guardBrakingStep(stepPrev, b.da)

	var acted BoundKind
	var step float64
	switch {
	case stop:
		step = brake
	case !finiteGuard(wish):
		step = brake
		acted |= BoundNotFinite
	default:
		step = wish - p
	}

	// Each bound as an interval on the step.
	posLo, posHi := b.lower-p, b.upper-p
	velLo, velHi := -b.dv, b.dv
	accLo, accHi := stepPrev-b.da, stepPrev+b.da
	viaLo, viaHi := -guardViableStep(p-b.lower, b.dv, b.da), guardViableStep(b.upper-p, b.dv, b.da)

	if !stop && acted == 0 {
		if wish < b.lower || wish > b.upper {
			acted |= BoundPosition
		}
		if step < velLo || step > velHi {
			acted |= BoundVelocity
		}
		if step < accLo || step > accHi {
			acted |= BoundAccel
		}
		if step < viaLo || step > viaHi {
			acted |= BoundViability
		}
	}

	lo := math.Max(math.Max(posLo, velLo), math.Max(accLo, viaLo))
	hi := math.Min(math.Min(posHi, velHi), math.Min(accHi, viaHi))
	if lo > hi {
		// Empty: either rounding on the viability boundary or a history that
		// broke a bound. Keep the bounds that protect the limits first:
		// position and viability (their intersection contains 0 whenever p is
		// in bounds), then velocity (contains 0, so clamping into the first
		// keeps it), and give up only acceleration, by the gap.
		if lo-hi > guardRoundingSlack(p, p2, b.dv) {
			acted |= BoundHistory
		}
		step = clampGuard(brake, velLo, velHi)
		safeLo, safeHi := math.Max(posLo, viaLo), math.Min(posHi, viaHi)
		if safeLo <= safeHi {
			step = clampGuard(step, safeLo, safeHi)
		}
	} else {
		step = clampGuard(step, lo, hi)
	}
	return clampGuard(p+step, b.lower, b.upper), acted
}

// guardBrakingStep is the step after prevStep when braking as hard as an
// acceleration of da per step allows: towards zero by da, not past it.
func guardBrakingStep(prevStep, da float64) float64 {
	switch {
	case prevStep > da:
		return prevStep - da
	case prevStep < -da:
		return prevStep + da
	default:
		return 0
	}
}

// guardViableStep is the largest step Δ ≥ 0 towards a limit room away such that
// the joint can still stop before the limit: the largest Δ with G(Δ) ≤ room
// (see the derivation at the top of this file). It returns +Inf when the
// velocity bound dv is tighter than viability anyway, and a negative number
// when room is negative (the limit is already passed).
func guardViableStep(room, dv, da float64) float64 {
	if room < 0 {
		return room
	}
	if math.IsInf(room, 1) || guardStopReach(dv, da) <= room {
		return math.Inf(1)
	}
	// Largest n with da·n(n+1)/2 ≤ room, from the quadratic formula and then
	// corrected for rounding. room < G(dv), so n ≤ ⌊dv/da⌋ + 1 and nothing
	// overflows.
	n := math.Floor((math.Sqrt(1+8*room/da) - 1) / 2)
	if n < 0 {
		n = 0
	}
	for n > 0 && da*n*(n+1)/2 > room {
		n--
	}
	for da*(n+1)*(n+2)/2 <= room {
		n++
	}
	return room/(n+1) + n*da/2
}

// guardStopReach is G(Δ) = Δ + S(Δ): how far a joint moving Δ per step travels
// from the previous target before it is at rest, braking at da per step.
func guardStopReach(step, da float64) float64 {
	n := math.Floor(step / da)
	return (n + 1) * (step - n*da/2)
}

// guardRoundingSlack is how far apart the bounds of an admissible interval
// may be pushed by rounding alone before the guard calls the history broken:
// 1024 units in the last place of the magnitudes involved (about 2e-13 m or
// rad for positions near 1). The property tests see at most a few tens of
// ulps; any real violation of a bound is larger than this by many orders of
// magnitude. The number is common practice, not derived.
func guardRoundingSlack(p, p2, dv float64) float64 {
	return 1024 * 0x1p-52 * (math.Abs(p) + math.Abs(p2) + dv)
}

func clampGuard(x, lo, hi float64) float64 {
	if x < lo {
		return lo
	}
	if x > hi {
		return hi
	}
	return x
}

func finiteGuard(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }
