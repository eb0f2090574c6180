package server

import (
	"fmt"
	"os"
	"sort"
	"sync"
	"time"

	"go.uber.org/zap"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"tautline/mpc"
	pb "tautline/proto/tautline/v1"
	"tautline/sim"
)

// cellHost is one served cell: its loaded cues, its session engine and its
// controller stream. mu guards everything below it; a tick holds it for
// the tick's compute.
type cellHost struct {
	cell *sim.Cell
	cfg  *Config
	log  *zap.Logger

	mu         sync.Mutex
	cues       map[string]*loadedCue
	eng        *engine
	controller *driveStream
	changed    chan struct{} // closed and replaced on every status change
}

func newCellHost(cell *sim.Cell, cfg *Config, log *zap.Logger, m *Metrics) (*cellHost, error) {
	h := &cellHost{
		cell:    cell,
		cfg:     cfg,
		log:     log.With(zap.String(fieldCell, cell.Name)),
		cues:    map[string]*loadedCue{},
		changed: make(chan struct{}),
	}
	eng, err := newEngine(cell, cfg, h.log, h.notifyLocked)
	if err != nil {
		return nil, fmt.Errorf("cell %q: %w", cell.Name, err)
	}
	markerNodes := make([]int, len(cell.Markers))
	for i, mk := range cell.Markers {
		markerNodes[i] = mk.Node
	}
	eng.metrics = m.Cell(cell.Name, cell.JointNames(), markerNodes)
	h.eng = eng
	return h, nil
}

// notifyLocked wakes every status watcher. Called with mu held.
func (h *cellHost) notifyLocked() {
	close(h.changed)
	h.changed = make(chan struct{})
}

func (h *cellHost) statusLocked() *pb.CellStatus {
	st := &pb.CellStatus{}
	h.eng.status(st, h.controller != nil)
	return st
}

func (h *cellHost) status() *pb.CellStatus {
	h.mu.Lock()
	defer h.mu.Unlock()
	return h.statusLocked()
}

// watch returns the status and a channel closed at the next change.
func (h *cellHost) watch() (*pb.CellStatus, <-chan struct{}) {
	h.mu.Lock()
	defer h.mu.Unlock()
	return h.statusLocked(), h.changed
}

func (h *cellHost) storeCue(lc *loadedCue) error {
	h.mu.Lock()
	defer h.mu.Unlock()
	if a := h.eng.armed; a != nil && a.lc.name == lc.name {
		return status.Errorf(codes.FailedPrecondition, "cue %q is armed on cell %q; arm another cue (or reset) before replacing it", lc.name, h.cell.Name)
	}
	h.cues[lc.name] = lc
	h.log.Info("cue loaded", zap.String("cue", lc.name), zap.Float64("duration_s", lc.info.DurationS), zap.Bool("reference_file", lc.refCSV != nil))
	return nil
}

func (h *cellHost) listCues() []*pb.CueInfo {
	h.mu.Lock()
	defer h.mu.Unlock()
	out := make([]*pb.CueInfo, 0, len(h.cues))
	for _, lc := range h.cues {
		out = append(out, lc.info)
	}
	sort.Slice(out, func(i, j int) bool { return out[i].CueName < out[j].CueName })
	return out
}

// armable says why ArmCue is refused in the current state, or "".
func (h *cellHost) armableLocked() string {
	switch h.eng.state {
	case pb.SessionState_SESSION_STATE_IDLE, pb.SessionState_SESSION_STATE_STANDBY, pb.SessionState_SESSION_STATE_HOLD:
		return ""
	case pb.SessionState_SESSION_STATE_FAULT:
		return fmt.Sprintf("cell %q is in fault (%s); ResetFault first", h.cell.Name, h.eng.reason)
	}
	return fmt.Sprintf("cell %q is %s, playing cue %q; Stop it first", h.cell.Name, stateName(h.eng.state), h.eng.armed.lc.name)
}

// arm makes cue the session's cue: a new session with its own capture
// and planner, in standby.
func (h *cellHost) arm(cueName string) (*pb.CellStatus, error) {
	h.mu.Lock()
	lc := h.cues[cueName]
	why := h.armableLocked()
	h.mu.Unlock()
	if lc == nil {
		return nil, status.Errorf(codes.NotFound, "cell %q has no cue %q; load it with LoadCue (loaded: %s)", h.cell.Name, cueName, h.cueNames())
	}
	if why != "" {
		return nil, status.Error(codes.FailedPrecondition, why)
	}
	// The slow part, outside the lock: the planner and the capture file.
	a := &armedCue{lc: lc, sessionID: newSessionID()}
	if !h.cfg.NoCorrection {
		pl, err := mpc.NewPlanner(h.cell, lc.cue, lc.ref, mpc.PlannerSettings{})
		if err != nil {
			return nil, status.Errorf(codes.FailedPrecondition, "cell %q cannot plan cue %q: %v", h.cell.Name, cueName, err)
		}
		a.planner, a.plan = pl, pl.NewPlan()
	}
	rec, err := newRecorder(h.cfg, h.cell, lc, a.sessionID, time.Now(), h.log)
	if err != nil {
		return nil, status.Errorf(codes.Unavailable, "cannot record the session (every session is recorded): %v", err)
	}
	a.rec = rec
	rec.metrics = h.eng.metrics

	h.mu.Lock()
	defer h.mu.Unlock()
	if why := h.armableLocked(); why != "" {
		rec.close("arming refused: "+why, 0)
		os.Remove(rec.path)
		return nil, status.Error(codes.FailedPrecondition, why)
	}
	e := h.eng
	e.arm(a, fmt.Sprintf("operator armed cue %q", cueName))
	e.event(pb.EventKind_EVENT_KIND_OPERATOR, 0, 0, "ArmCue "+cueName)
	if h.controller != nil {
		e.event(pb.EventKind_EVENT_KIND_CONTROLLER_CONNECTED, 0, 0, "controller "+h.controller.peer+" connected before the session began")
	}
	return h.statusLocked(), nil
}

func (h *cellHost) cueNames() string {
	h.mu.Lock()
	defer h.mu.Unlock()
	if len(h.cues) == 0 {
		return "none"
	}
	names := make([]string, 0, len(h.cues))
	for n := range h.cues {
		names = append(names, n)
	}
	sort.Strings(names)
	return fmt.Sprint(names)
}

func (h *cellHost) start() (*pb.CellStatus, error) {
	h.mu.Lock()
	defer h.mu.Unlock()
	if why := h.eng.canStart(); why != "" {
		return nil, status.Error(codes.FailedPrecondition, why)
	}
	h.eng.event(pb.EventKind_EVENT_KIND_OPERATOR, 0, 0, "Start")
	h.eng.startLive()
	return h.statusLocked(), nil
}

func (h *cellHost) stop(reason string) (*pb.CellStatus, error) {
	h.mu.Lock()
	defer h.mu.Unlock()
	e := h.eng
	e.event(pb.EventKind_EVENT_KIND_OPERATOR, 0, 0, "Stop: "+reason)
	switch e.state {
	case pb.SessionState_SESSION_STATE_FAULT, pb.SessionState_SESSION_STATE_HOLD:
		// Already bringing the arms to rest.
	default:
		if reason == "" {
			reason = "no reason given"
		}
		e.setState(pb.SessionState_SESSION_STATE_HOLD, "operator stop: "+reason)
	}
	return h.statusLocked(), nil
}

func (h *cellHost) resetFault(reason string) (*pb.CellStatus, error) {
	h.mu.Lock()
	defer h.mu.Unlock()
	e := h.eng
	if e.state != pb.SessionState_SESSION_STATE_FAULT {
		return nil, status.Errorf(codes.FailedPrecondition, "cell %q is in %s, not fault; nothing to reset", h.cell.Name, stateName(e.state))
	}
	if reason == "" {
		reason = "no reason given"
	}
	e.event(pb.EventKind_EVENT_KIND_OPERATOR, 0, 0, "ResetFault: "+reason)
	e.setState(pb.SessionState_SESSION_STATE_IDLE, "operator reset: "+reason)
	e.endSession("fault reset: " + reason)
	return h.statusLocked(), nil
}

// attach binds a controller stream to the cell, or says why not.
func (h *cellHost) attach(ds *driveStream) error {
	h.mu.Lock()
	defer h.mu.Unlock()
	if c := h.controller; c != nil {
		return status.Errorf(codes.AlreadyExists,
			"cell %q already has a controller stream (from %s, open since %s); one controller per cell: close that stream first",
			h.cell.Name, c.peer, c.opened.UTC().Format(time.RFC3339))
	}
	h.controller = ds
	h.eng.metrics.ControllerConnected(true)
	h.eng.streamOpened()
	h.log.Info("controller connected", zap.String("peer", ds.peer), zap.String(fieldSession, h.eng.sessionID()), zap.String(fieldState, stateName(h.eng.state)))
	h.eng.event(pb.EventKind_EVENT_KIND_CONTROLLER_CONNECTED, 0, 0, "controller "+ds.peer)
	h.notifyLocked()
	return nil
}

// detach unbinds ds. lost says the stream ended badly (stall, drop, slow
// reader, shutdown): a live cell then goes to Config.OnControllerLoss.
func (h *cellHost) detach(ds *driveStream, reason string) {
	h.mu.Lock()
	defer h.mu.Unlock()
	if h.controller != ds {
		return
	}
	h.controller = nil
	h.eng.metrics.ControllerConnected(false)
	h.log.Info("controller disconnected", zap.String("peer", ds.peer), zap.String(fieldSession, h.eng.sessionID()), zap.String(fieldReason, reason))
	h.eng.event(pb.EventKind_EVENT_KIND_CONTROLLER_DISCONNECTED, 0, 0, reason)
	h.eng.controllerLost("controller lost: " + reason)
	h.notifyLocked()
}

// shutdown ends the session's capture cleanly.
func (h *cellHost) shutdown(reason string) {
	h.mu.Lock()
	defer h.mu.Unlock()
	h.eng.endSession(reason)
}
