package mpc

import (
	"fmt"
	"math"
)

// commandRing keeps the most recent commanded joint vectors with their
// apply times, oldest first, overwriting the oldest when full.
type commandRing struct {
	nj     int
	timesS []float64
	joints []float64 // cap × nj
	head   int       // index of the oldest entry
	count  int
}

func newCommandRing(capacity, nj int) commandRing {
	return commandRing{nj: nj, timesS: make([]float64, capacity), joints: make([]float64, capacity*nj)}
}

func (r *commandRing) clear() { r.head, r.count = 0, 0 }

// at returns the i-th oldest entry.
func (r *commandRing) at(i int) (float64, []float64) {
	j := (r.head + i) % len(r.timesS)
	return r.timesS[j], r.joints[j*r.nj : (j+1)*r.nj]
}

func (r *commandRing) last() (float64, bool) {
	if r.count == 0 {
		return 0, false
	}
	t, _ := r.at(r.count - 1)
	return t, true
}

func (r *commandRing) push(t float64, q []float64) {
	c := len(r.timesS)
	var j int
	if r.count < c {
		j = (r.head + r.count) % c
		r.count++
	} else {
		j = r.head
		r.head = (r.head + 1) % c
	}
	r.timesS[j] = t
	copy(r.joints[j*r.nj:(j+1)*r.nj], q)
}

// RecordCommand records joints sent to the arms that will be in force at
// cue time applyTimeS (see the timing model on Estimator). Apply times must not decrease from call to call; recording the
// latest apply time again replaces its joints (record a guess before
// PredictTo, the command actually sent after planning). Reset clears the
// record. NaN or infinite values and a joint vector of the wrong
// length are errors.
func (e *Estimator) RecordCommand(applyTimeS float64, joints []float64) error {
	if math.IsNaN(applyTimeS) || math.IsInf(applyTimeS, 0) {
		return fmt.Errorf("%w: command apply time %g s is not finite", ErrBadObservation, applyTimeS)
	}
	if len(joints) != e.nj {
		return fmt.Errorf("%w: command has %d joints, the cell has %d", ErrBadObservation, len(joints), e.nj)
	}
	for i, v := range joints {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("%w: command joint %d is %g", ErrBadObservation, i, v)
		}
	}
	if t, ok := e.cmds.last(); ok {
		if applyTimeS == t {
			_, q := e.cmds.at(e.cmds.count - 1)
			copy(q, joints)
			return nil
		}
		if applyTimeS < t {
			return fmt.Errorf("%w: command apply time %g s is before the previous one, %g s", ErrTimeOrder, applyTimeS, t)
		}
	}
	e.cmds.push(applyTimeS, joints)
	return nil
}

// pathJoints writes the joints at time t of the piecewise linear joint path
// through (startS, start), every recorded command with apply time in
// (startS, endS), and, if end is not nil, (endS, end). Before startS it
// returns start; after the last point it holds the last point's joints.
// If bias is not nil it is added to every command point (not to start or
// end).
func (e *Estimator) pathJoints(dst []float64, t, startS float64, start []float64, endS float64, end, bias []float64) {
	prevT, prevQ := startS, start
	if t <= startS {
		copy(dst, start)
		return
	}
	// biasW is the weight of bias at t: it grows from 0 at start to 1 at
	// the first command and stays 1 on every later command point.
	biasW := 0.0
	defer func() {
		if bias != nil && biasW != 0 {
			for i := range dst {
				dst[i] += biasW * bias[i]
			}
		}
	}()
	for i := 0; i < e.cmds.count; i++ {
		ct, cq := e.cmds.at(i)
		if ct <= startS {
			continue
		}
		if end != nil && ct >= endS {
			break
		}
		if ct >= t {
			lerpJoints(dst, t, prevT, prevQ, ct, cq)
			if prevT == startS {
				biasW = min((t-startS)/(ct-startS), 1)
			} else {
				biasW = 1
			}
			return
		}
		prevT, prevQ = ct, cq
	}
	if end != nil {
		lerpJoints(dst, t, prevT, prevQ, endS, end)
		if prevT != startS {
			biasW = max(0, 1-(t-prevT)/(endS-prevT))
		}
		return
	}
	copy(dst, prevQ)
	if prevT != startS {
		biasW = 1
	}
}

// trackingOffsetTo writes the arm's tracking offset at the filter's time:
// the measured joints there minus the commanded ones (interpolated between
// the recorded commands around that time). It returns false, with dst
// zero, if the recorded commands do not span the filter's time.
func (e *Estimator) trackingOffsetTo(dst []float64) bool {
	clear(dst)
	tF := e.gridTime(e.k)
	for i := 0; i+1 < e.cmds.count; i++ {
		t0, q0 := e.cmds.at(i)
		t1, q1 := e.cmds.at(i + 1)
		if t0 <= tF && tF <= t1 {
			lerpJoints(dst, tF, t0, q0, t1, q1)
			for j := range dst {
				dst[j] = e.joints[j] - dst[j]
			}
			return true
		}
	}
	if e.cmds.count > 0 {
		if t, q := e.cmds.at(e.cmds.count - 1); t == tF {
			for j := range dst {
				dst[j] = e.joints[j] - q[j]
			}
			return true
		}
	}
	return false
}

// lerpJoints interpolates linearly between (t0, q0) and (t1, q1) at t,
// holding q1 beyond t1.
func lerpJoints(dst []float64, t, t0 float64, q0 []float64, t1 float64, q1 []float64) {
	if t >= t1 || t1 <= t0 {
		copy(dst, q1)
		return
	}
	w := (t - t0) / (t1 - t0)
	for i := range dst {
		dst[i] = q0[i] + w*(q1[i]-q0[i])
	}
}

// gridIndex rounds a time to the nearest grid index, clamped to ±2⁵³ so
// that absurd times stay far away instead of overflowing.
func (e *Estimator) gridIndex(tS float64) int64 {
	const limit = 1 << 53
	return int64(max(-limit, min(limit, math.Round((tS-e.t0)/e.h))))
}

// PredictTo writes the estimated positions at cue time applyTimeS (rounded
// to the filter's grid) into xCur and one step earlier into xPrev: the
// filtered mean advanced by the process model with the joints of the
// recorded commands, corrected by the arm's tracking offset (latency
// compensation; see the timing model). The filter itself does not change. An apply time before the filter's time or
// more than MaxPredictSteps steps after it is an error, as is a step that
// fails.
func (e *Estimator) PredictTo(xCur, xPrev []float64, applyTimeS float64) error {
	if !e.init {
		return ErrNotInitialised
	}
	if len(xCur) != e.d || len(xPrev) != e.d {
		panic("mpc: PredictTo: wrong length")
	}
	if math.IsNaN(applyTimeS) || math.IsInf(applyTimeS, 0) {
		return fmt.Errorf("%w: apply time %g s is not finite", ErrBadObservation, applyTimeS)
	}
	k := e.gridIndex(applyTimeS)
	if k < e.k {
		return fmt.Errorf("%w: apply time %g s is before the filter's time %g s", ErrTimeOrder, applyTimeS, e.gridTime(e.k))
	}
	if k-e.k > int64(e.set.MaxPredictSteps) {
		return fmt.Errorf("%w: apply time %g s is %d steps after the filter's time %g s (at most %d)",
			ErrPredictTooFar, applyTimeS, k-e.k, e.gridTime(e.k), e.set.MaxPredictSteps)
	}
	cur, prev, next := e.predCur, e.predPrev, e.predNext
	copy(cur, e.mean[:e.d])
	copy(prev, e.mean[e.d:2*e.d])
	tF := e.gridTime(e.k)
	e.trackingOffsetTo(e.bias)
	for j := e.k + 1; j <= k; j++ {
		e.pathJoints(e.predJoints, e.gridTime(j), tF, e.joints, 0, nil, e.bias)
		if err := e.proc.Step(next, cur, prev, e.predJoints); err != nil {
			return fmt.Errorf("mpc: predicting to %g s: %w", applyTimeS, err)
		}
		prev, cur, next = cur, next, prev
	}
	copy(xCur, cur)
	copy(xPrev, prev)
	return nil
}
