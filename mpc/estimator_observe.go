package mpc

import (
	"fmt"
	"math"
)

// Observe feeds one observation to the filter: the markers visible in a
// tracker frame captured at cue time captureTimeS, and the arms' measured
// joints at that time. The first observation after construction or Reset
// initialises the filter (see initialise); every later one predicts the
// filter to the capture time's grid point and updates it with the markers
// that pass the gate. rep is filled in; its slices are reused.
//
// On an error the estimator is unchanged and rep is not meaningful.
func (e *Estimator) Observe(captureTimeS float64, joints []float64, markers []MarkerObs, rep *EstimatorReport) error {
	if err := e.checkObservation(captureTimeS, joints, markers); err != nil {
		return err
	}
	if cap(rep.Rejected) < len(e.markers.Nodes) {
		rep.Rejected = make([]RejectedMarker, 0, len(e.markers.Nodes))
	}
	*rep = EstimatorReport{Rejected: rep.Rejected[:0], MarkersSeen: len(markers)}

	kc := int64(0)
	fresh := !e.init
	if !fresh {
		kc = e.gridIndex(captureTimeS)
		if kc <= e.k {
			return fmt.Errorf("%w: capture time %g s is not after the previous observation's grid time %g s (step %g s)",
				ErrTimeOrder, captureTimeS, e.gridTime(e.k), e.h)
		}
		fresh = kc-e.k > int64(e.set.MaxPredictSteps)
	}
	if fresh {
		if err := e.initialise(joints); err != nil {
			return err
		}
		rep.Initialised = true
		kc = 0
	} else {
		copy(e.wMean, e.mean)
		cov := e.wCov
		if e.prepared && e.prepFrom == e.k && e.prepTo == kc {
			copy(e.wCov, e.pCov)
			cov = nil // prepared: advance the mean only
			rep.UsedPrepared = true
		} else {
			copy(e.wCov, e.cov)
		}
		if err := e.advance(e.wMean, cov, e.k, kc, joints, nil); err != nil {
			return fmt.Errorf("mpc: predicting to the capture at %g s: %w", captureTimeS, err)
		}
		rep.StepsPredicted = int(kc - e.k)
	}
	if err := e.gateAndUpdate(markers, rep); err != nil {
		return err
	}

	// Commit.
	if fresh {
		e.t0, e.init, e.noMarkers = captureTimeS, true, 0
	}
	e.k = kc
	e.prepared = false
	e.mean, e.wMean = e.wMean, e.mean
	e.cov, e.wCov = e.wCov, e.cov
	copy(e.joints, joints)
	if rep.MarkersUsed == 0 {
		e.noMarkers++
	} else {
		e.noMarkers = 0
	}
	rep.GridTimeS = e.gridTime(kc)
	rep.CaptureOffsetS = captureTimeS - rep.GridTimeS
	rep.TicksWithoutMarkers = e.noMarkers
	rep.Stale = e.noMarkers >= e.set.StaleAfterTicks
	return nil
}

// checkObservation validates an observation and maps the markers to the
// world frame into e.world.
func (e *Estimator) checkObservation(captureTimeS float64, joints []float64, markers []MarkerObs) error {
	if math.IsNaN(captureTimeS) || math.IsInf(captureTimeS, 0) {
		return fmt.Errorf("%w: capture time %g s is not finite", ErrBadObservation, captureTimeS)
	}
	if len(joints) != e.nj {
		return fmt.Errorf("%w: %d measured joints, the cell has %d", ErrBadObservation, len(joints), e.nj)
	}
	for i, v := range joints {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("%w: measured joint %d is %g", ErrBadObservation, i, v)
		}
	}
	nm := len(e.markers.Nodes)
	if len(markers) > nm {
		return fmt.Errorf("%w: %d markers, the cell has %d", ErrBadObservation, len(markers), nm)
	}
	clear(e.seen)
	for i, m := range markers {
		if m.Marker < 0 || m.Marker >= nm {
			return fmt.Errorf("%w: marker index %d, the cell has markers 0…%d", ErrBadObservation, m.Marker, nm-1)
		}
		if e.seen[m.Marker] {
			return fmt.Errorf("%w: marker %d appears twice", ErrBadObservation, m.Marker)
		}
		e.seen[m.Marker] = true
		for a, v := range m.PosTrackerM {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return fmt.Errorf("%w: marker %d coordinate %d is %g", ErrBadObservation, m.Marker, a, v)
			}
		}
		e.world[i] = e.markers.TrackerToWorld.Apply(m.PosTrackerM)
	}
	return nil
}

// advance steps mean (and cov, unless nil) from grid index from to grid
// index to, one process step at a time, with the joints of the path that
// starts at the measured joints of the filter's time and ends, if end is
// not nil, at end at grid index to; bias, if not nil, is added to the
// command points of the path.
func (e *Estimator) advance(mean, cov []float64, from, to int64, end, bias []float64) error {
	d := e.d
	h2a := e.h * e.h * e.set.ProcessAccelMPerS2
	q := h2a*h2a + e.set.ProcessPositionM*e.set.ProcessPositionM
	for i := range e.fixed {
		if e.fixed[i] {
			e.variances[i] = 0
		} else {
			e.variances[i] = q
		}
	}
	qo := e.set.MarkerOffsetWalkMPerSqrtS * e.set.MarkerOffsetWalkMPerSqrtS * e.h
	for i := e.d; i < len(e.variances); i++ {
		e.variances[i] = qo
	}
	tF, tEnd := e.gridTime(from), e.gridTime(to)
	for j := from + 1; j <= to; j++ {
		e.pathJoints(e.qStep, e.gridTime(j), tF, e.joints, tEnd, end, bias)
		if err := e.proc.Step(e.stepNext, mean[:d], mean[d:2*d], e.qStep); err != nil {
			return err
		}
		if cov != nil {
			e.propagate(cov, e.variances)
		}
		copy(mean[d:2*d], mean[:d])
		copy(mean[:d], e.stepNext)
	}
	return nil
}

// Prepare does the costly part of the next Observe ahead of time: it
// propagates the covariance from the filter's time to the grid time of
// nextCaptureTimeS, linearised along the mean predicted with the recorded
// commands corrected by the arm's tracking offset (measured joints are not
// known yet). The next Observe whose
// capture falls on that grid time uses it and only advances the mean
// (with the measured joints, exactly as without Prepare); any other
// Observe ignores it. So the result differs from an unprepared Observe
// only by the joints the covariance was linearised at (commanded instead
// of measured), and not at all when the arm is where it was commanded.
// Calling Prepare is optional; it moves about half of a tick's estimator
// work off the path from observation to command.
func (e *Estimator) Prepare(nextCaptureTimeS float64) error {
	if !e.init {
		return ErrNotInitialised
	}
	if math.IsNaN(nextCaptureTimeS) || math.IsInf(nextCaptureTimeS, 0) {
		return fmt.Errorf("%w: capture time %g s is not finite", ErrBadObservation, nextCaptureTimeS)
	}
	k := e.gridIndex(nextCaptureTimeS)
	if k <= e.k {
		return fmt.Errorf("%w: preparing for %g s, not after the filter's time %g s", ErrTimeOrder, nextCaptureTimeS, e.gridTime(e.k))
	}
	if k-e.k > int64(e.set.MaxPredictSteps) {
		return fmt.Errorf("%w: preparing for %g s, %d steps after the filter's time %g s (at most %d)",
			ErrPredictTooFar, nextCaptureTimeS, k-e.k, e.gridTime(e.k), e.set.MaxPredictSteps)
	}
	e.prepared = false
	copy(e.pMean, e.mean)
	copy(e.pCov, e.cov)
	e.trackingOffsetTo(e.bias)
	if err := e.advance(e.pMean, e.pCov, e.k, k, nil, e.bias); err != nil {
		return fmt.Errorf("mpc: preparing for the capture at %g s: %w", nextCaptureTimeS, err)
	}
	e.prepared, e.prepFrom, e.prepTo = true, e.k, k
	return nil
}

// initialise sets e.wMean and e.wCov to the prior of a first observation:
// the process's rest pose for the measured joints, at rest, with
//
//	P_xx = σ_l²·I + σ_s²·(11ᵀ ⊗ I₃)   (each node's own offset and a common shift),
//	P    = [[P_xx, P_xx], [P_xx, P_xx + h²σ_v²·I]]   (x_{k−1} = x_k − h·v),
//
// over the free coordinates (fixed ones have zero variance), and marker
// offsets of zero mean and variance σ_o0²·I (InitialMarkerOffsetM),
// independent of x. The markers of the observation then update this prior
// like any other.
func (e *Estimator) initialise(joints []float64) error {
	d, n := e.d, e.n
	if err := e.proc.RestPoseTo(e.predCur, joints); err != nil {
		return fmt.Errorf("mpc: rest pose for the first observation: %w", err)
	}
	for _, v := range e.predCur {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("mpc: rest pose for the first observation is not finite")
		}
	}
	copy(e.wMean[:d], e.predCur)
	copy(e.wMean[d:2*d], e.predCur)
	sl2 := e.set.InitialLocalM * e.set.InitialLocalM
	ss2 := e.set.InitialShiftM * e.set.InitialShiftM
	hv := e.h * e.set.InitialSpeedMPerS
	p := e.wCov
	clear(p)
	for i := 0; i < d; i++ {
		if e.fixed[i] {
			continue
		}
		for j := i % 3; j < d; j += 3 {
			if e.fixed[j] {
				continue
			}
			v := ss2
			if i == j {
				v += sl2
			}
			p[i*n+j] = v
			p[i*n+d+j] = v
			p[(d+i)*n+j] = v
			p[(d+i)*n+d+j] = v
		}
		p[(d+i)*n+d+i] += hv * hv
	}
	clear(e.wMean[2*d:])
	so2 := e.set.InitialMarkerOffsetM * e.set.InitialMarkerOffsetM
	for i := 2 * d; i < n; i++ {
		p[i*n+i] = so2
	}
	return nil
}
