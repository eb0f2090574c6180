package client

import (
	"fmt"
	"math"

	"tautline/sim"
)

// LimitKind names the limit a joint target broke.
type LimitKind int

const (
	// LimitNotFinite: the target is NaN or infinite.
	LimitNotFinite LimitKind = iota
	// LimitPosition: the target is below the joint's lower or above its
	// upper position limit.
	LimitPosition
	// LimitVelocity: |q − q_prev| / tick exceeds the velocity limit.
	LimitVelocity
	// LimitAcceleration: |q − 2·q_prev + q_prev2| / tick² exceeds the
	// acceleration limit.
	LimitAcceleration
	numLimitKinds
)

func (k LimitKind) String() string {
	switch k {
	case LimitNotFinite:
		return "not finite"
	case LimitPosition:
		return "position"
	case LimitVelocity:
		return "velocity"
	case LimitAcceleration:
		return "acceleration"
	}
	return fmt.Sprintf("LimitKind(%d)", int(k))
}

// Violation is one broken limit of one joint target.
type Violation struct {
	Tick  uint64 // the tick_seq of the command
	Joint int    // index in cell joint order
	Name  string // "<arm>.<joint>"
	Kind  LimitKind
	// Value is the offending quantity (position, velocity or acceleration
	// in rad, rad/s, rad/s², or m-based for prismatic joints) and Limit the
	// bound it broke.
	Value, Limit float64
}

func (v Violation) String() string {
	if v.Kind == LimitNotFinite {
		return fmt.Sprintf("tick %d: joint %s target is %v", v.Tick, v.Name, v.Value)
	}
	return fmt.Sprintf("tick %d: joint %s %s %.6g beyond limit %.6g", v.Tick, v.Name, v.Kind, v.Value, v.Limit)
}

// LimitChecker checks a stream of joint targets, one per tick, against a
// cell's joint limits. It is deliberately independent of the daemon's
// guard (package mpc): plain arithmetic on the targets as the controller
// would execute them, so a guard bug shows up here as a counted violation.
//
// The checks, per joint i and tick k with period h:
//
//	lower ≤ q_k ≤ upper
//	|q_k − q_{k−1}| / h ≤ v_max
//	|q_k − 2·q_{k−1} + q_{k−2}| / h² ≤ a_max
//
// Each bound is allowed a slack of RoundingSlack relative to its size (at
// least RoundingSlack absolute), so a target exactly on a bound is not
// reported for the last bit of floating-point rounding.
type LimitChecker struct {
	limits  []sim.JointLimit
	periodS float64

	prev, prev2 []float64
	history     int // how many of prev, prev2 are valid (0, 1, 2)

	ticks      uint64
	counts     [numLimitKinds]int
	worst      []Violation // first few violations, for messages
	keepWorst  int
	violations int
}

// RoundingSlack is the relative slack the LimitChecker allows on every
// bound (common practice: a few thousand ulps of the quantity; the
// acceleration check divides by h², so q's last-bit rounding of 1e-16 rad
// becomes 1e-12 rad/s² at a 10 ms tick, far below this slack on any
// realistic limit).
const RoundingSlack = 1e-9

// NewLimitChecker returns a checker for limits with control period
// periodS. It panics if periodS is not positive.
func NewLimitChecker(limits []sim.JointLimit, periodS float64) *LimitChecker {
	if !(periodS > 0) || math.IsInf(periodS, 0) {
		panic("client: NewLimitChecker: period must be positive and finite")
	}
	n := len(limits)
	return &LimitChecker{
		limits:    append([]sim.JointLimit(nil), limits...),
		periodS:   periodS,
		prev:      make([]float64, n),
		prev2:     make([]float64, n),
		keepWorst: 20,
	}
}

// Seed sets the history to joints at rest at q (as after the arms settle):
// the next target's velocity and acceleration are measured from q with zero
// velocity.
func (c *LimitChecker) Seed(q []float64) {
	c.checkLen(q)
	copy(c.prev, q)
	copy(c.prev2, q)
	c.history = 2
}

// Check checks target q for tick and appends it to the history. It returns
// the number of limits q breaks (one joint can break several). Without
// history (no Seed, first call) only positions are checked; after one
// target, velocities too.
func (c *LimitChecker) Check(tick uint64, q []float64) int {
	c.checkLen(q)
	c.ticks++
	n := 0
	h := c.periodS
	for i, l := range c.limits {
		v := q[i]
		if math.IsNaN(v) || math.IsInf(v, 0) {
			n += c.add(Violation{Tick: tick, Joint: i, Name: l.Name, Kind: LimitNotFinite, Value: v})
			continue
		}
		if v < l.Lower-slack(l.Lower) {
			n += c.add(Violation{Tick: tick, Joint: i, Name: l.Name, Kind: LimitPosition, Value: v, Limit: l.Lower})
		} else if v > l.Upper+slack(l.Upper) {
			n += c.add(Violation{Tick: tick, Joint: i, Name: l.Name, Kind: LimitPosition, Value: v, Limit: l.Upper})
		}
		if c.history >= 1 {
			vel := (v - c.prev[i]) / h
			if math.Abs(vel) > l.MaxVelocity+slack(l.MaxVelocity) {
				n += c.add(Violation{Tick: tick, Joint: i, Name: l.Name, Kind: LimitVelocity, Value: vel, Limit: l.MaxVelocity})
			}
		}
		if c.history >= 2 {
			acc := (v - 2*c.prev[i] + c.prev2[i]) / (h * h)
			if math.Abs(acc) > l.MaxAccel+slack(l.MaxAccel) {
				n += c.add(Violation{Tick: tick, Joint: i, Name: l.Name, Kind: LimitAcceleration, Value: acc, Limit: l.MaxAccel})
			}
		}
	}
	copy(c.prev2, c.prev)
	copy(c.prev, q)
	if c.history < 2 {
		c.history++
	}
	return n
}

func slack(bound float64) float64 { return RoundingSlack * math.Max(1, math.Abs(bound)) }

func (c *LimitChecker) add(v Violation) int {
	c.counts[v.Kind]++
	c.violations++
	if len(c.worst) < c.keepWorst {
		c.worst = append(c.worst, v)
	}
	return 1
}

func (c *LimitChecker) checkLen(q []float64) {
	if len(q) != len(c.limits) {
		panic(fmt.Sprintf("client: LimitChecker: %d joint targets for %d joints", len(q), len(c.limits)))
	}
}

// Ticks is the number of targets checked.
func (c *LimitChecker) Ticks() uint64 { return c.ticks }

// Violations is the total number of broken limits counted.
func (c *LimitChecker) Violations() int { return c.violations }

// Count is the number of violations of kind k.
func (c *LimitChecker) Count(k LimitKind) int { return c.counts[k] }

// First returns the first violations found (at most 20), in order.
func (c *LimitChecker) First() []Violation { return c.worst }
