package server

import (
	"crypto/rand"
	"encoding/hex"
	"fmt"
	"math"
	"time"

	"go.uber.org/zap"

	"tautline/mpc"
	pb "tautline/proto/tautline/v1"
	"tautline/sim"
)

// engine is one cell's session state machine and tick computation. Every
// method is called with the cell's lock held. It owns the per-cell buffers
// so that a tick allocates nothing in steady state.
type engine struct {
	cell        *sim.Cell
	cfg         *Config
	log         *zap.Logger
	guard       *mpc.Guard
	nq          int
	tickS       float64
	maxLatencyS float64
	markerIndex map[string]int
	markerSeen  []bool
	markers     []mpc.MarkerObs
	onChange    func()       // tells watchers the status changed
	metrics     *CellMetrics // nil records nothing

	est    *mpc.Estimator
	estRep mpc.EstimatorReport
	x, xp  []float64 // estimated state at the tick and one tick before
	xn, xq []float64 // predicted state for the next tick
	// markerOffset is the estimator's marker offsets, handed to the
	// planner before each prepare (offset-free tracking).
	markerOffset []float64
	// jointHist holds the measured joints of recent observations; qCapture
	// is the joints at the frame's capture time interpolated from it.
	jointHist jointHistory
	qCapture  []float64

	// Session.
	state     pb.SessionState
	reason    string
	since     time.Time
	armed     *armedCue // nil in idle
	pose      []float64 // standby target: the cue's first pose, or last at cue end
	origin    float64   // controller clock time of the cue's start
	hasOrigin bool

	// Guard history: the last two targets sent.
	prev, prev2 []float64
	hasHistory  bool
	wish        []float64
	target      []float64
	grep        mpc.GuardReport
	pwish       []float64 // preview scratch
	ph1, ph2    []float64
	qbar        []float64
	corr        []float64 // correction in force: last target − nominal
	coastCorr   []float64 // correction at coast entry
	coastTicks  int

	// The controller stream's clock.
	newStream   bool
	haveSeq     bool
	expectSeq   uint64
	haveLastT   bool
	lastT       float64 // cue_time_s of the last accepted observation
	tickT       float64 // time of the last tick answered (accepted or not)
	haveCapture bool
	lastCapture float64
	lastPlayT   float64 // cue time of the last tick's target

	// Real-time iteration.
	prepared  bool
	preparedT float64 // cue time the planner was prepared for
	prepStart time.Time
	budget    mpc.Budget

	// Counters for the status.
	badInRow, goodInRow      int
	ticks, rejected, bounded uint64
	lastSeq                  uint64
	lastSolveUs, maxSolveUs  uint32
	feedbackS                float64         // this tick's feedback phase, s (metrics)
	commandState             pb.SessionState // the state the last command carried
	fallbackRun              int
	sessionTicks             uint64
	// Session counters and the tracking error (see observedTrackingError).
	fallbackTicks    uint64
	coastEntries     uint32
	lastBoundActions uint32
	boundActions     uint64
	trackErrM        float64
	trackErrMarkers  int
	refBuf           []float64 // the reference's marker positions, xyz per marker
}

// armedCue is a session: the armed cue, its planner and its capture.
type armedCue struct {
	lc        *loadedCue
	planner   *mpc.Planner // nil with Config.NoCorrection
	plan      *mpc.Plan
	rec       *recorder
	sessionID string
}

func newEngine(cell *sim.Cell, cfg *Config, log *zap.Logger, onChange func()) (*engine, error) {
	lim := cell.JointLimits()
	bounds := make([]mpc.JointBounds, len(lim))
	for i, l := range lim {
		bounds[i] = mpc.JointBounds{Name: l.Name, Lower: l.Lower, Upper: l.Upper, MaxVelocity: l.MaxVelocity, MaxAccel: l.MaxAccel}
	}
	guard, err := mpc.NewGuard(bounds, cell.TickS)
	if err != nil {
		return nil, err
	}
	est, err := mpc.NewCellEstimator(cell, nil, mpc.EstimatorSettings{})
	if err != nil {
		return nil, fmt.Errorf("estimator: %w", err)
	}
	nq, d := cell.NumJoints(), est.Dim()
	vec := func() []float64 { return make([]float64, nq) }
	e := &engine{
		cell: cell, cfg: cfg, log: log, guard: guard, nq: nq, tickS: cell.TickS,
		maxLatencyS: cfg.MaxLatencyS,
		markerIndex: make(map[string]int, len(cell.Markers)),
		markerSeen:  make([]bool, len(cell.Markers)),
		markers:     make([]mpc.MarkerObs, 0, len(cell.Markers)),
		onChange:    onChange,
		est:         est,
		estRep:      mpc.EstimatorReport{Rejected: make([]mpc.RejectedMarker, 0, len(cell.Markers))},
		x:           make([]float64, d), xp: make([]float64, d),
		xn: make([]float64, d), xq: make([]float64, d),
		markerOffset: make([]float64, 3*len(cell.Markers)),
		refBuf:       make([]float64, 3*len(cell.Markers)),
		jointHist:    newJointHistory(nq), qCapture: make([]float64, nq),
		state: pb.SessionState_SESSION_STATE_IDLE, reason: "daemon started", since: time.Now(),
		pose: vec(), prev: vec(), prev2: vec(), wish: vec(), target: vec(),
		grep:  mpc.GuardReport{Acted: make([]mpc.BoundKind, nq)},
		pwish: vec(), ph1: vec(), ph2: vec(), qbar: vec(), corr: vec(), coastCorr: vec(),
	}
	for i, m := range cell.Markers {
		e.markerIndex[m.ID] = i
	}
	budget := seconds(cfg.PrepareBudgetS)
	e.budget = func() bool { return time.Since(e.prepStart) < budget }
	return e, nil
}

func newSessionID() string {
	var b [8]byte
	rand.Read(b[:])
	return hex.EncodeToString(b[:])
}

func (e *engine) sessionID() string {
	if e.armed == nil {
		return ""
	}
	return e.armed.sessionID
}

// setState moves the session to a new state, logs it at info with its
// reason, records it and tells the watchers.
func (e *engine) setState(to pb.SessionState, reason string) {
	from := e.state
	e.state, e.reason, e.since = to, reason, time.Now()
	e.log.Info("state change",
		zap.String(fieldSession, e.sessionID()),
		zap.Uint64(fieldTick, e.lastSeq),
		zap.String(fieldState, stateName(to)),
		zap.String("from", stateName(from)),
		zap.String(fieldReason, reason))
	e.event(pb.EventKind_EVENT_KIND_STATE_CHANGE, from, to, reason)
	if to == pb.SessionState_SESSION_STATE_COAST {
		e.coastEntries++
		copy(e.coastCorr, e.corr)
		e.coastTicks = 0
		e.goodInRow = 0
	}
	if to != pb.SessionState_SESSION_STATE_LIVE {
		e.prepared = false
	}
	if e.onChange != nil {
		e.onChange()
	}
}

func (e *engine) event(kind pb.EventKind, from, to pb.SessionState, reason string) {
	if e.armed == nil {
		return
	}
	e.armed.rec.event(&pb.Event{Kind: kind, FromState: from, ToState: to, TickSeq: e.lastSeq, CueTimeS: e.lastPlayT, Reason: reason})
}

// stateName is the short lower-case name of a state for logs and messages.
func stateName(s pb.SessionState) string {
	switch s {
	case pb.SessionState_SESSION_STATE_IDLE:
		return "idle"
	case pb.SessionState_SESSION_STATE_STANDBY:
		return "standby"
	case pb.SessionState_SESSION_STATE_LIVE:
		return "live"
	case pb.SessionState_SESSION_STATE_COAST:
		return "coast"
	case pb.SessionState_SESSION_STATE_HOLD:
		return "hold"
	case pb.SessionState_SESSION_STATE_FAULT:
		return "fault"
	}
	return s.String()
}

// endSession closes the armed session's capture with reason.
func (e *engine) endSession(reason string) {
	if e.armed == nil {
		return
	}
	if err := e.armed.rec.close(reason, e.sessionTicks); err != nil {
		e.log.Error("closing capture", zap.String(fieldSession, e.armed.sessionID), zap.String("capture", e.armed.rec.path), zap.Error(err))
	}
	e.armed = nil
	e.hasOrigin = false
	e.sessionTicks = 0
}

// arm makes a the session (closing the previous one) and goes to standby
// with the cue's first pose as the target.
func (e *engine) arm(a *armedCue, reason string) {
	e.endSession("another cue was armed")
	e.armed = a
	a.lc.cue.PositionTo(e.pose, a.lc.cue.StartS())
	e.hasOrigin = false
	e.badInRow, e.goodInRow = 0, 0
	e.resetSessionCounters()
	e.setState(pb.SessionState_SESSION_STATE_STANDBY, reason)
}

// resetSessionCounters zeroes the counters a CellStatus reports per
// session.
func (e *engine) resetSessionCounters() {
	e.ticks, e.rejected, e.bounded, e.maxSolveUs = 0, 0, 0, 0
	e.fallbackTicks, e.coastEntries, e.lastBoundActions, e.boundActions = 0, 0, 0, 0
	e.trackErrM, e.trackErrMarkers = 0, 0
}

// canStart says why Start is refused, or "" if it may go.
func (e *engine) canStart() string {
	if e.state != pb.SessionState_SESSION_STATE_STANDBY {
		return fmt.Sprintf("cell %q is in %s; Start needs standby (arm a cue with ArmCue)", e.cell.Name, stateName(e.state))
	}
	if !e.hasHistory {
		return fmt.Sprintf("cell %q has had no observation yet, so the arms' position is unknown; connect the controller first", e.cell.Name)
	}
	names := e.cell.JointNames()
	worst, at := 0.0, 0
	for i := range e.prev {
		d := math.Max(math.Abs(e.prev[i]-e.pose[i]), math.Abs(e.prev[i]-e.prev2[i]))
		if d > worst {
			worst, at = d, i
		}
	}
	if worst > e.cfg.StartToleranceRad {
		return fmt.Sprintf("the arms are not at rest at the cue's first pose yet (joint %s is %.4g away, more than -start-tolerance-rad %.4g); wait in standby while they get there",
			names[at], worst, e.cfg.StartToleranceRad)
	}
	return ""
}

// startLive makes the session live; the next observation's cue_time_s
// becomes the cue's start.
func (e *engine) startLive() {
	e.hasOrigin = false
	e.badInRow, e.goodInRow = 0, 0
	clear(e.corr)
	e.setState(pb.SessionState_SESSION_STATE_LIVE, "operator start")
}

// controllerLost applies Config.OnControllerLoss to a live or coasting
// cell.
func (e *engine) controllerLost(reason string) {
	switch e.state {
	case pb.SessionState_SESSION_STATE_LIVE, pb.SessionState_SESSION_STATE_COAST:
		if e.cfg.OnControllerLoss == "hold" {
			e.setState(pb.SessionState_SESSION_STATE_HOLD, reason)
		} else if e.state == pb.SessionState_SESSION_STATE_LIVE {
			e.setState(pb.SessionState_SESSION_STATE_COAST, reason)
		}
	}
}

// streamOpened resets the stream clock: tick_seq and times restart with a
// new stream. The estimator starts afresh, since nothing is known of what
// happened while no controller was connected.
func (e *engine) streamOpened() {
	e.newStream = true
	e.haveSeq, e.haveLastT, e.haveCapture = false, false, false
	e.badInRow, e.goodInRow = 0, 0
	e.est.Reset()
	e.prepared = false
}

// status fills a CellStatus.
func (e *engine) status(dst *pb.CellStatus, connected bool) {
	dst.CellName = e.cell.Name
	dst.State = e.state
	dst.StateReason = e.reason
	dst.StateSinceUnixNs = e.since.UnixNano()
	dst.SessionId = e.sessionID()
	dst.CueName, dst.CueDurationS, dst.CapturePath = "", 0, ""
	if e.armed != nil {
		dst.CueName = e.armed.lc.name
		dst.CueDurationS = e.armed.lc.cue.DurationS()
		dst.CapturePath = e.armed.rec.path
	}
	dst.CueTimeS = e.lastPlayT
	dst.ControllerConnected = connected
	dst.LastTickSeq = e.lastSeq
	dst.Ticks = e.ticks
	dst.RejectedTicks = e.rejected
	dst.RejectedInRow = uint32(e.badInRow)
	dst.BoundedTicks = e.bounded
	dst.LastSolveTimeUs = e.lastSolveUs
	dst.MaxSolveTimeUs = e.maxSolveUs
	dst.TrackingErrorM = e.trackErrM
	dst.TrackingErrorMarkers = uint32(e.trackErrMarkers)
	dst.FallbackTicks = e.fallbackTicks
	dst.CoastEntries = e.coastEntries
	dst.LastBoundActions = e.lastBoundActions
	dst.BoundActions = e.boundActions
}
