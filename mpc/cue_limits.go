package mpc

import (
	"fmt"
	"math"
	"slices"

	"tautline/sim"
)

// JointPeak is what the limit check found for one joint over the whole cue:
// the position range and the largest speed and acceleration, with when they
// happen and how close they come to the joint's limit. Units are rad (m for
// a prismatic joint) and seconds.
type JointPeak struct {
	Name                     string
	MinPosition, MaxPosition float64

	PeakSpeed        float64 // max |velocity|, rad/s
	PeakSpeedAtS     float64 // cue time of PeakSpeed, s
	PeakSpeedOfLimit float64 // PeakSpeed / MaxVelocity; 0 for an unlimited joint

	PeakAccel        float64 // max |acceleration|, rad/s²
	PeakAccelAtS     float64 // cue time of PeakAccel, s
	PeakAccelOfLimit float64 // PeakAccel / MaxAccel; 0 for an unlimited joint
}

// limitSlack is the rounding allowance of the limit check, relative to the
// limit (at least 1e-9 absolute): a row exactly on a bound must load, and
// the spline's value there can differ from the row by a few ulps. It is far
// below anything a robot could resolve. (Common practice, not a standard.)
func limitSlack(limit float64) float64 { return 1e-9 * math.Max(1, math.Abs(limit)) }

// checkCueLimits samples the spline and returns the peaks, or an error for
// the earliest sample that breaks a limit.
//
// The samples are, in time order: every row (knot); a uniform grid of step
// sampleStepS from the start (so at least SamplesPerTick samples per tick,
// as issue 4 asks); and, per segment, the points where the sampled
// quantities can peak between knots: the vertex of each joint's velocity
// (a quadratic on the segment) and the zeros of its velocity (where the
// position, a cubic, turns). Acceleration is linear on each segment, so it
// peaks at knots. The peaks therefore are exact, not limited by the grid;
// the grid sets how finely the reported first time follows the spline.
func checkCueLimits(tt *timeTable, order []int, sp *cubicSpline, joints []CueJoint, sampleStepS float64) ([]JointPeak, error) {
	start, end := sp.startS(), sp.endS()
	if (end-start)/sampleStepS > maxCueSamples {
		return nil, sim.FileErrors{{File: tt.file, Line: tt.rows[len(tt.rows)-1].line,
			Msg: fmt.Sprintf("the cue is %s s long; checking it every %s s would take more than %d samples", fmtNum(end-start), fmtNum(sampleStepS), maxCueSamples)}}
	}
	peaks := make([]JointPeak, len(joints))
	bounds := make([]jointBounds, len(joints))
	for j, jt := range joints {
		bounds[j] = boundsOf(jt)
		peaks[j] = JointPeak{Name: jt.Name, MinPosition: math.Inf(1), MaxPosition: math.Inf(-1), PeakSpeedAtS: start, PeakAccelAtS: start}
	}
	knots := sp.knotsS
	var us []float64
	grid := 0 // next grid index; grid time = start + grid·sampleStepS
	for i := 0; i+1 < len(knots); i++ {
		t0, t1 := knots[i], knots[i+1]
		h := t1 - t0
		us = append(us[:0], 0)
		for ; ; grid++ {
			tg := start + float64(grid)*sampleStepS
			if tg >= t1 {
				break
			}
			if tg > t0 {
				us = append(us, tg-t0)
			}
		}
		for j := range joints {
			_, b, c, d := sp.segmentCoef(i, j)
			us = appendVelocityCriticalPoints(us, b, c, d, h)
		}
		if i+2 == len(knots) {
			us = append(us, h)
		}
		slices.Sort(us)
		for _, u := range us {
			row := i
			if u >= h {
				row = i + 1
			}
			t := t0 + u
			for j, jt := range joints {
				pos, vel, acc := sp.segmentEval(i, j, u)
				if u == 0 || u >= h {
					pos = tt.rows[row].values[order[j]] // the spline passes through the row exactly
				}
				if !bounds[j].hold(pos, vel, acc) {
					msg := limitBreach(jt, bounds[j], pos, vel, acc, t)
					r := tt.rows[row]
					return nil, sim.FileErrors{{File: tt.file, Line: r.line, Col: tt.columnOfField(r, order[j]),
						Field: fieldName(jt.Name, order[j]+1), Msg: msg}}
				}
				updatePeak(&peaks[j], jt, pos, vel, acc, t)
			}
		}
	}
	return peaks, nil
}

// appendVelocityCriticalPoints appends the u in (0, h) where the velocity
// v(u) = b + 2c·u + 3d·u² has its vertex (|v| can peak there) or a zero
// (the position can peak there).
func appendVelocityCriticalPoints(us []float64, b, c, d, h float64) []float64 {
	in := func(u float64) bool { return u > 0 && u < h }
	if d != 0 {
		if u := -c / (3 * d); in(u) {
			us = append(us, u)
		}
		// Zeros of 3d·u² + 2c·u + b, in the cancellation-free form.
		disc := c*c - 3*d*b
		if disc >= 0 {
			q := -(c + math.Copysign(math.Sqrt(disc), c))
			if q != 0 {
				if u := q / (3 * d); in(u) {
					us = append(us, u)
				}
				if u := b / q; in(u) {
					us = append(us, u)
				}
			}
		}
	} else if c != 0 {
		if u := -b / (2 * c); in(u) {
			us = append(us, u)
		}
	}
	return us
}

func units(jt CueJoint) (pos, vel, acc string) {
	if jt.Prismatic {
		return "m", "m/s", "m/s²"
	}
	return "rad", "rad/s", "rad/s²"
}

// jointBounds are a joint's limits widened by limitSlack, computed once per
// load so the per-sample test is four comparisons.
type jointBounds struct{ lower, upper, speed, accel float64 }

func boundsOf(jt CueJoint) jointBounds {
	return jointBounds{
		lower: jt.Lower - limitSlack(jt.Lower),
		upper: jt.Upper + limitSlack(jt.Upper),
		speed: jt.MaxVelocity + limitSlack(jt.MaxVelocity),
		accel: jt.MaxAccel + limitSlack(jt.MaxAccel),
	}
}

func (b jointBounds) hold(pos, vel, acc float64) bool {
	return pos <= b.upper && pos >= b.lower && math.Abs(vel) <= b.speed && math.Abs(acc) <= b.accel
}

// limitBreach says which of the joint's limits the sample breaks (position
// first, then velocity, then acceleration); it is called only when
// b.hold failed, which a NaN also causes.
func limitBreach(jt CueJoint, b jointBounds, pos, vel, acc, t float64) string {
	pu, vu, au := units(jt)
	switch {
	case pos > b.upper:
		return fmt.Sprintf("position %s %s at t=%s s is above the upper limit %s %s", fmtNum(pos), pu, fmtTime(t), fmtNum(jt.Upper), pu)
	case pos < b.lower:
		return fmt.Sprintf("position %s %s at t=%s s is below the lower limit %s %s", fmtNum(pos), pu, fmtTime(t), fmtNum(jt.Lower), pu)
	case math.Abs(vel) > b.speed:
		return fmt.Sprintf("velocity %s %s at t=%s s exceeds the limit %s %s; slow the cue down here", fmtNum(vel), vu, fmtTime(t), fmtNum(jt.MaxVelocity), vu)
	case math.Abs(acc) > b.accel:
		return fmt.Sprintf("acceleration %s %s at t=%s s exceeds the limit %s %s; space the rows out or smooth the motion here", fmtNum(acc), au, fmtTime(t), fmtNum(jt.MaxAccel), au)
	}
	return fmt.Sprintf("the spline is not finite at t=%s s (position %v, velocity %v, acceleration %v)", fmtTime(t), pos, vel, acc)
}

func updatePeak(p *JointPeak, jt CueJoint, pos, vel, acc, t float64) {
	if pos < p.MinPosition {
		p.MinPosition = pos
	}
	if pos > p.MaxPosition {
		p.MaxPosition = pos
	}
	if v := math.Abs(vel); v > p.PeakSpeed {
		p.PeakSpeed, p.PeakSpeedAtS = v, t
		if !math.IsInf(jt.MaxVelocity, 1) {
			p.PeakSpeedOfLimit = v / jt.MaxVelocity
		}
	}
	if a := math.Abs(acc); a > p.PeakAccel {
		p.PeakAccel, p.PeakAccelAtS = a, t
		if !math.IsInf(jt.MaxAccel, 1) {
			p.PeakAccelOfLimit = a / jt.MaxAccel
		}
	}
}
