package server

import (
	"errors"
	"fmt"
	"math"
	"time"

	"go.uber.org/zap"

	"tautline/mpc"
	pb "tautline/proto/tautline/v1"
)

// previewTicks is how many ticks after the next one a command previews.
const previewTicks = mpc.DefaultPreviewTicks

// maxEstimatorGapTicks is the longest gap between two marker frames, in
// ticks, that the estimator predicts across; after a longer one (a clock
// jump, a long occlusion of the whole stream) it starts afresh, so no
// observation can make a tick's work grow without bound.
const maxEstimatorGapTicks = 50

// commandSlot is a Command with every sub-message allocated once, so that
// filling it allocates nothing.
type commandSlot struct {
	cmd     pb.Command
	next    pb.JointTargets
	preview []pb.JointTargets
	pptrs   []*pb.JointTargets
	bounds  []pb.BoundAction
	bptrs   []*pb.BoundAction
	terr    pb.TickError
}

func newCommandSlot(nq int) *commandSlot {
	s := &commandSlot{
		preview: make([]pb.JointTargets, previewTicks),
		pptrs:   make([]*pb.JointTargets, previewTicks),
		bounds:  make([]pb.BoundAction, 4*nq),
		bptrs:   make([]*pb.BoundAction, 0, 4*nq),
	}
	s.next.Positions = make([]float64, nq)
	for i := range s.preview {
		s.preview[i].Positions = make([]float64, nq)
		s.pptrs[i] = &s.preview[i]
	}
	s.cmd.Next = &s.next
	return s
}

// playT is the cue time of controller-clock time t in a session that has
// started playing.
func (e *engine) playT(t float64) float64 {
	return t - e.origin + e.armed.lc.cue.StartS()
}

// nominalTo writes the cue's joints at controller-clock time t.
func (e *engine) nominalTo(dst []float64, t float64) {
	e.armed.lc.cue.PositionTo(dst, e.playT(t))
}

// coastFade is the weight of the correction k ticks into coast: a raised
// cosine from 1 to 0 over Config.CoastFadeS, so the correction's rate of
// change is continuous at both ends.
func (e *engine) coastFade(k int) float64 {
	s := float64(k) * e.tickS / e.cfg.CoastFadeS
	if s >= 1 {
		return 0
	}
	return 0.5 * (1 + math.Cos(math.Pi*s))
}

func maxAbsDiff(a, b []float64) float64 {
	m := 0.0
	for i := range a {
		m = math.Max(m, math.Abs(a[i]-b[i]))
	}
	return m
}

// seedHistory restarts the guard's history with the arms at rest at q
// (clamped into the position limits).
func (e *engine) seedHistory(q []float64) {
	for i, l := range e.cell.JointLimits() {
		v := math.Min(math.Max(q[i], l.Lower), l.Upper)
		e.prev[i], e.prev2[i] = v, v
	}
	e.hasHistory = true
}

// tick answers one observation: validate → estimator update → planner
// feedback → guard → command, written into s. recvAt is when the
// observation arrived. The caller sends s.cmd and then calls prepareNext.
func (e *engine) tick(obs *pb.Observation, recvAt time.Time, s *commandSlot) {
	te := e.validate(obs)
	valid := te.ok() || te.code == pb.TickErrorCode_TICK_ERROR_CODE_NO_CUE_ARMED
	e.expectSeq, e.haveSeq = obs.GetTickSeq()+1, true
	e.lastSeq = obs.GetTickSeq()
	e.ticks++
	e.sessionTicks++
	if e.armed != nil {
		e.armed.rec.observation(obs)
	}
	q := obs.GetMeasuredJointPositions()

	// The tick's time: the observation's, or, when it cannot be trusted,
	// one tick after the last tick answered.
	var t float64
	if valid {
		t = obs.GetCueTimeS()
		e.lastT, e.haveLastT = t, true
	} else {
		t = e.tickT + e.tickS
	}
	streamStart := e.newStream && valid
	if streamStart {
		e.newStream = false
		if e.armed != nil && e.hasOrigin && t < e.tickT+e.tickS {
			// The controller's clock restarted with the stream: resume the
			// cue where it was.
			e.origin = t - e.lastPlayT + e.armed.lc.cue.StartS()
		}
	}
	e.tickT = t
	tNext := t + e.tickS

	switch {
	case valid && !e.hasHistory:
		e.seedHistory(q)
	case streamStart && maxAbsDiff(q, e.prev) > e.cfg.ReseedToleranceRad:
		e.log.Warn("controller reconnected with the arms away from the last command; the guard's history restarts at the measured joints",
			zap.String(fieldSession, e.sessionID()), zap.Uint64(fieldTick, e.lastSeq),
			zap.Float64("distance", maxAbsDiff(q, e.prev)))
		e.seedHistory(q)
	case !e.hasHistory:
		home := e.qbar
		e.cell.HomeTo(home)
		e.seedHistory(home)
	}

	// Estimator update, in every state, so the estimate has converged by
	// the time the session goes live.
	var estErr error
	observed := false // the estimator took this tick's frame
	if te.ok() && e.est.Initialised() && obs.GetCaptureTimeS()-e.est.TimeS() > maxEstimatorGapTicks*e.tickS {
		// Predicting across a long gap would cost one model step per tick
		// of it; start the filter afresh instead.
		e.est.Reset()
		e.haveCapture = false
	}
	if te.ok() {
		e.jointHist.push(t, q)
	}
	if te.ok() && (!e.haveCapture || obs.GetCaptureTimeS() > e.lastCapture) {
		// The frame is older than the joints measured with it: the
		// estimator steps the figure with the joints of the frame's time.
		e.jointHist.at(e.qCapture, obs.GetCaptureTimeS(), q)
		err := e.est.Observe(obs.GetCaptureTimeS(), e.qCapture, e.markers, &e.estRep)
		switch {
		case err == nil:
			observed = true
			e.haveCapture, e.lastCapture = true, obs.GetCaptureTimeS()
			e.metrics.RejectedMarkers(len(e.estRep.Rejected))
		case errors.Is(err, mpc.ErrTimeOrder):
			// The frame falls on the filter's last grid point; nothing new.
		default:
			estErr = err
			e.est.Reset()
			e.haveCapture = false
		}
	}
	stale := e.est.Initialised() && e.estRep.Stale

	if e.armed != nil && !e.hasOrigin &&
		(e.state == pb.SessionState_SESSION_STATE_LIVE || e.state == pb.SessionState_SESSION_STATE_COAST) {
		e.origin, e.hasOrigin = t, true
	}
	if observed && e.hasOrigin &&
		(e.state == pb.SessionState_SESSION_STATE_LIVE || e.state == pb.SessionState_SESSION_STATE_COAST) {
		before := e.trackErrMarkers
		e.trackErrMarkers = 0
		e.observedTrackingError(obs.GetCaptureTimeS())
		if e.trackErrMarkers > 0 {
			e.metrics.TrackingError(e.trackErrM)
		} else {
			e.trackErrMarkers = before
		}
	}

	mode := e.state
	planned := false
	stop := false
	switch mode {
	case pb.SessionState_SESSION_STATE_IDLE:
		if valid {
			copy(e.wish, q)
		} else {
			copy(e.wish, e.prev)
		}
	case pb.SessionState_SESSION_STATE_STANDBY:
		copy(e.wish, e.pose)
	case pb.SessionState_SESSION_STATE_HOLD, pb.SessionState_SESSION_STATE_FAULT:
		stop = true
	case pb.SessionState_SESSION_STATE_LIVE:
		e.nominalTo(e.qbar, tNext)
		a := e.armed
		var err error
		switch {
		case !te.ok():
			e.metrics.Fallback(FallbackRejectedInput)
		case estErr != nil:
			err = fmt.Errorf("estimator: %w", estErr)
			e.metrics.Fallback(FallbackEstimator)
		case a.planner == nil:
		case !e.est.Initialised():
			err = mpc.ErrNotInitialised
			e.metrics.Fallback(FallbackEstimator)
		case stale:
			e.metrics.Fallback(FallbackStaleFeedback)
		default:
			err = e.plan(t)
			planned = err == nil
			if !planned {
				e.metrics.Fallback(FallbackPlannerError)
			}
		}
		if err != nil {
			te = tickError{code: pb.TickErrorCode_TICK_ERROR_CODE_PLANNER, message: "planner fallback (nominal with the correction held): " + err.Error()}
		}
		switch {
		case planned:
			copy(e.wish, a.plan.Target)
		case a.planner == nil && te.ok():
			copy(e.wish, e.qbar)
		default:
			for i := range e.wish {
				e.wish[i] = e.qbar[i] + e.corr[i]
			}
		}
		if te.ok() {
			e.badInRow = 0
		} else {
			e.badInRow++
		}
		if !planned && !(a.planner == nil && te.ok()) {
			e.fallbackTicks++
		}
	case pb.SessionState_SESSION_STATE_COAST:
		e.nominalTo(e.qbar, tNext)
		e.fallbackTicks++
		e.coastTicks++
		f := e.coastFade(e.coastTicks)
		for i := range e.wish {
			e.wish[i] = e.qbar[i] + f*e.coastCorr[i]
		}
		if te.ok() && estErr == nil && !stale && e.est.Initialised() {
			e.goodInRow++
		} else {
			e.goodInRow = 0
		}
	}
	if !te.ok() {
		e.rejected++
		if te.code != pb.TickErrorCode_TICK_ERROR_CODE_PLANNER {
			e.metrics.RejectedObservation(te.code)
		}
	}

	if stop {
		e.guard.StopTarget(e.target, e.prev, e.prev2, &e.grep)
	} else {
		e.guard.Apply(e.target, e.wish, e.prev, e.prev2, &e.grep)
	}
	e.fillBounds(s)
	e.lastBoundActions = uint32(len(s.bptrs))
	e.boundActions += uint64(len(s.bptrs))
	e.prev2, e.prev, e.target = e.prev, e.target, e.prev2
	historyBroken := e.grep.Any&mpc.BoundHistory != 0
	if e.grep.Any != 0 {
		e.bounded++
	}
	if e.armed != nil && (mode == pb.SessionState_SESSION_STATE_LIVE || mode == pb.SessionState_SESSION_STATE_COAST) {
		for i := range e.corr {
			e.corr[i] = e.prev[i] - e.qbar[i]
		}
	} else {
		clear(e.corr)
	}
	if e.est.Initialised() {
		if err := e.est.RecordCommand(tNext, e.prev); err != nil {
			e.est.Reset()
			e.haveCapture = false
		}
	}

	e.fillPreview(s, mode, planned, stop, tNext)
	if e.armed != nil && e.hasOrigin {
		e.lastPlayT = e.playT(tNext)
	}

	// Transitions.
	switch {
	case historyBroken:
		e.setState(pb.SessionState_SESSION_STATE_FAULT, "the guard found the command history outside a bound; the arms were commanded beyond a limit")
	case mode == pb.SessionState_SESSION_STATE_LIVE && stale:
		e.setState(pb.SessionState_SESSION_STATE_COAST, fmt.Sprintf("feedback unusable: no marker accepted for %d ticks", e.estRep.TicksWithoutMarkers))
	case mode == pb.SessionState_SESSION_STATE_LIVE && e.badInRow >= e.cfg.BadTicksToCoast:
		e.setState(pb.SessionState_SESSION_STATE_COAST, fmt.Sprintf("%d bad ticks in a row; the last: %s", e.badInRow, te.message))
	case mode == pb.SessionState_SESSION_STATE_COAST && e.goodInRow >= e.cfg.RecoverTicks:
		e.badInRow = 0
		e.setState(pb.SessionState_SESSION_STATE_LIVE, fmt.Sprintf("feedback usable again for %d ticks", e.goodInRow))
	}
	if (e.state == pb.SessionState_SESSION_STATE_LIVE || e.state == pb.SessionState_SESSION_STATE_COAST) &&
		e.lastPlayT >= e.armed.lc.cue.EndS() {
		e.armed.lc.cue.PositionTo(e.pose, e.armed.lc.cue.EndS())
		e.setState(pb.SessionState_SESSION_STATE_STANDBY, "cue ended")
	}

	// The command.
	c := &s.cmd
	c.TickSeq = obs.GetTickSeq()
	s.next.CueTimeS = tNext
	copy(s.next.Positions, e.prev)
	c.Preview = s.pptrs
	c.State = e.state
	c.Error = nil
	if !te.ok() {
		s.terr = pb.TickError{Code: te.code, Field: te.field, Message: te.message}
		c.Error = &s.terr
	}
	solve := time.Since(recvAt)
	e.feedbackS = solve.Seconds()
	e.commandState = e.state
	us := uint32(min(solve/time.Microsecond, math.MaxUint32))
	c.SolveTimeUs = us
	e.lastSolveUs = us
	e.maxSolveUs = max(e.maxSolveUs, us)
	if e.armed != nil {
		e.armed.rec.command(c)
	}
	e.logTick(te, mode, solve)
}

// plan runs the planner for tick time t: the estimate at t (latency
// compensated), a prepare if the tick was not prepared for this time, then
// the feedback phase.
func (e *engine) plan(t float64) error {
	a := e.armed
	if err := e.est.PredictTo(e.x, e.xp, t); err != nil {
		return fmt.Errorf("estimator: %w", err)
	}
	tc := e.playT(t)
	if !e.prepared || math.Abs(e.preparedT-tc) > e.tickS/2 {
		e.prepStart = time.Now()
		e.setMarkerOffset(a.planner)
		if err := a.planner.Prepare(tc, e.prev, e.prev2, e.x, e.xp, e.budget); err != nil {
			e.prepared = false
			return err
		}
	}
	e.prepared = false
	return a.planner.Feedback(a.plan, e.x, e.xp)
}

// setMarkerOffset hands the estimator's marker offsets to the planner, so
// it tracks the markers where they are observed to sit relative to the
// model's figure (offset-free tracking: see mpc.Planner and the
// estimator's marker offsets). Call it before every Prepare.
func (e *engine) setMarkerOffset(pl *mpc.Planner) {
	e.est.MarkerOffsetTo(e.markerOffset)
	pl.SetMarkerOffset(e.markerOffset)
}

// prepareNext runs the planner's prepare phase for the next tick, after
// the command went out (real-time iteration).
//
// It also records the tick's metrics, once per tick, since only now are
// both of its phases known.
func (e *engine) prepareNext() {
	prepareS := -1.0
	defer func() { e.metrics.ObserveTick(e.commandState, prepareS, e.feedbackS) }()
	if e.state != pb.SessionState_SESSION_STATE_LIVE || e.armed == nil || e.armed.planner == nil ||
		!e.est.Initialised() || !e.hasOrigin {
		return
	}
	tNext := e.tickT + e.tickS
	start := time.Now()
	if err := e.est.PredictTo(e.xn, e.xq, tNext); err != nil {
		e.prepared = false
		return
	}
	e.prepStart = time.Now()
	tc := e.playT(tNext)
	e.setMarkerOffset(e.armed.planner)
	err := e.armed.planner.Prepare(tc, e.prev, e.prev2, e.xn, e.xq, e.budget)
	e.prepared, e.preparedT = err == nil, tc
	prepareS = time.Since(start).Seconds()
}

// fillBounds lists the bounds the guard enforced on this tick's target.
func (e *engine) fillBounds(s *commandSlot) {
	s.bptrs = s.bptrs[:0]
	if e.grep.Any == 0 {
		s.cmd.BoundsActed = nil
		return
	}
	n := 0
	add := func(j int, kind pb.BoundKind) {
		b := &s.bounds[n]
		n++
		b.JointIndex, b.Kind, b.Adjustment = uint32(j), kind, e.target[j]-e.wish[j]
		if !finite(b.Adjustment) {
			b.Adjustment = 0
		}
		s.bptrs = append(s.bptrs, b)
		e.metrics.BoundActed(j, kind)
	}
	for j, k := range e.grep.Acted {
		if k == 0 {
			continue
		}
		switch {
		case k&mpc.BoundPosition != 0:
			// Beyond a position limit; the guard's viability bound, set
			// with it, is the same adjustment and is not listed twice.
			if e.target[j] > e.wish[j] {
				add(j, pb.BoundKind_BOUND_KIND_POSITION_LOWER)
			} else {
				add(j, pb.BoundKind_BOUND_KIND_POSITION_UPPER)
			}
		case k&mpc.BoundViability != 0:
			add(j, pb.BoundKind_BOUND_KIND_VIABILITY)
		}
		if k&mpc.BoundVelocity != 0 {
			add(j, pb.BoundKind_BOUND_KIND_VELOCITY)
		}
		if k&mpc.BoundAccel != 0 {
			add(j, pb.BoundKind_BOUND_KIND_ACCELERATION)
		}
		if n == len(s.bounds) {
			break
		}
	}
	s.cmd.BoundsActed = s.bptrs
}

// fillPreview writes the targets of the ticks after the next one, each
// through the guard from the one before, so a controller that falls back
// on the preview stays within every limit too.
func (e *engine) fillPreview(s *commandSlot, mode pb.SessionState, planned, stop bool, tNext float64) {
	copy(e.ph1, e.prev)
	copy(e.ph2, e.prev2)
	for i := range s.preview {
		tt := tNext + float64(i+1)*e.tickS
		s.preview[i].CueTimeS = tt
		dst := s.preview[i].Positions
		switch {
		case stop:
		case planned && len(e.armed.plan.Preview) >= (i+1)*e.nq:
			copy(e.pwish, e.armed.plan.Preview[i*e.nq:(i+1)*e.nq])
		case mode == pb.SessionState_SESSION_STATE_LIVE:
			e.nominalTo(e.pwish, tt)
			for j := range e.pwish {
				e.pwish[j] += e.corr[j]
			}
		case mode == pb.SessionState_SESSION_STATE_COAST:
			e.nominalTo(e.pwish, tt)
			f := e.coastFade(e.coastTicks + i + 1)
			for j := range e.pwish {
				e.pwish[j] += f * e.coastCorr[j]
			}
		default: // idle and standby aim where this tick aimed
			copy(e.pwish, e.wish)
		}
		if stop {
			e.guard.StopTarget(dst, e.ph1, e.ph2, nil)
		} else {
			e.guard.Apply(dst, e.pwish, e.ph1, e.ph2, nil)
		}
		copy(e.ph2, e.ph1)
		copy(e.ph1, dst)
	}
}

// logTick writes the per-tick log lines: slow ticks and the first bad tick
// of a run at warn, one tick in Config.DebugEveryTicks at debug.
func (e *engine) logTick(te tickError, mode pb.SessionState, solve time.Duration) {
	if solve > seconds(e.cfg.SlowTickS) {
		if ce := e.log.Check(zap.WarnLevel, "slow tick"); ce != nil {
			ce.Write(zap.String(fieldSession, e.sessionID()), zap.Uint64(fieldTick, e.lastSeq),
				zap.String(fieldState, stateName(mode)), zap.Duration("solve", solve))
		}
	}
	if !te.ok() {
		e.fallbackRun++
		if e.fallbackRun == 1 && te.code != pb.TickErrorCode_TICK_ERROR_CODE_NO_CUE_ARMED {
			e.log.Warn("tick fallback", zap.String(fieldSession, e.sessionID()), zap.Uint64(fieldTick, e.lastSeq),
				zap.String(fieldState, stateName(mode)), zap.String("code", te.code.String()),
				zap.String("field", te.field), zap.String(fieldReason, te.message))
			e.event(pb.EventKind_EVENT_KIND_REJECTED_INPUT, mode, mode, te.field+": "+te.message)
		}
	} else {
		if e.fallbackRun > 1 {
			e.log.Info("ticks usable again", zap.String(fieldSession, e.sessionID()), zap.Uint64(fieldTick, e.lastSeq),
				zap.Int("bad_ticks", e.fallbackRun))
		}
		e.fallbackRun = 0
	}
	if e.lastSeq%uint64(e.cfg.DebugEveryTicks) == 0 {
		if ce := e.log.Check(zap.DebugLevel, "tick"); ce != nil {
			ce.Write(zap.String(fieldSession, e.sessionID()), zap.Uint64(fieldTick, e.lastSeq),
				zap.String(fieldState, stateName(e.state)), zap.Duration("solve", solve),
				zap.Int("markers_used", e.estRep.MarkersUsed), zap.String("bounds", e.grep.Any.String()))
		}
	}
}
