package client

import (
	"context"
	"errors"
	"fmt"
	"math"
	"time"

	"tautline/mpc"
	"tautline/proto/capture"
	pb "tautline/proto/tautline/v1"
	"tautline/sim"
)

// SimSettings configures a simulated cell run (RunSimCell). Cell, Cue and
// CueCSV are required; the zero value of every other field means its
// documented default.
type SimSettings struct {
	Cell *sim.Cell
	// Cue is the cue as parsed from CueCSV (for the open-loop playback and
	// the reference); CueCSV is sent to the daemon under CueName.
	Cue         *mpc.Cue
	CueCSV      []byte
	CueName     string // "" means "sim"
	CueFileName string // quoted in messages and the capture; "" means CueName+".csv"

	// Profile is the mismatch applied to the plant; nil means a perfect
	// model and tracker. Its pushes happen at plant time, which is cue
	// time when the daemon accepts Start after StandbyTicks (and later by
	// the extra standby time otherwise).
	Profile *sim.MismatchProfile

	// OpenLoop plays the nominal cue on the plant and ignores the
	// daemon's corrections (today's practice, the baseline). The daemon
	// still gets every observation, so latency and the capture are
	// comparable with a closed-loop run.
	OpenLoop bool

	// Fast runs as fast as the daemon answers instead of one tick per
	// tick period.
	Fast bool

	// DurationS shortens the run to this much of the cue; 0 means the
	// whole cue.
	DurationS float64

	// StandbyTicks are sent in standby before the first Start, so the
	// daemon sees the arms at rest at the cue's first pose. 0 means 3.
	// While the daemon refuses Start (its arms not yet at rest at the
	// first pose) the cell stays in standby, applying its commands, for
	// at most MaxStandbyS (0 means 10 s).
	StandbyTicks int
	MaxStandbyS  float64

	// CapturePath, if not empty, records what the simulated cell sent and
	// received (proto/capture); the file must not exist.
	CapturePath string

	// Progress, if not nil, is called after every tick.
	Progress func(p SimProgress)
}

// SimProgress is the state of a run after one tick.
type SimProgress struct {
	Tick       uint64
	CueTimeS   float64 // cue time the plant has reached
	EndS       float64 // cue time the run ends at
	State      pb.SessionState
	ErrorM     float64 // this tick's figure error (see SimResult)
	Violations int
}

// SimResult summarises a run. The figure error of a tick is the root mean
// square, over the cell's markers, of the distance between the plant's
// true marker node and the reference (the cue simulated on the cell's
// nominal model from the settled rest pose, mpc.SimulateNominal: what the
// daemon tracks when no reference file is given), in the world frame, m.
type SimResult struct {
	OpenLoop bool
	// Ticks counts the live ticks (cue start to end); ErrorM, TimeS hold
	// their figure error and the cue time it was measured at.
	Ticks  int
	TimeS  []float64
	ErrorM []float64
	// RMSErrorM is the root mean square of ErrorM; MaxErrorM its largest.
	RMSErrorM, MaxErrorM float64

	// Checker holds the independent limit check of every command the
	// daemon sent (in both modes).
	Checker *LimitChecker

	// RoundTripS is each live tick's time from sending the observation to
	// receiving its command, on this process's clock, s. SolveUs is the
	// daemon's own solve time for the tick, µs.
	RoundTripS []float64
	SolveUs    []uint32

	// BoundedTicks counts ticks whose command says the guard acted;
	// ErrorTicks those that carried a TickError (rejected or fallback).
	BoundedTicks, ErrorTicks int
	// States counts commands by the session state they report.
	States map[pb.SessionState]int
	// CapturePath is where the run was recorded ("" if not).
	CapturePath string
}

// RunSimCell runs a simulated cell against the daemon behind c: it loads
// and arms the cue, streams the plant's observations at the tick rate (or
// as fast as possible), applies the commands (or the nominal cue when
// open-loop), checks every command against the cell's limits with a
// LimitChecker, and measures the figure error against the reference.
func RunSimCell(ctx context.Context, c *Client, s SimSettings) (res *SimResult, err error) {
	if s.Cell == nil || s.Cue == nil || len(s.CueCSV) == 0 {
		return nil, errors.New("RunSimCell: Cell, Cue and CueCSV are required")
	}
	cell, cue := s.Cell, s.Cue
	if s.CueName == "" {
		s.CueName = "sim"
	}
	if s.CueFileName == "" {
		s.CueFileName = s.CueName + ".csv"
	}
	if s.StandbyTicks <= 0 {
		s.StandbyTicks = 3
	}
	if s.MaxStandbyS <= 0 {
		s.MaxStandbyS = 10
	}
	tick := cell.TickS
	startS, endS := cue.StartS(), cue.EndS()
	if s.DurationS > 0 && startS+s.DurationS < endS {
		endS = startS + s.DurationS
	}
	ref, err := mpc.SimulateNominal(cell, cue, cue.StartS(), cue.EndS(), mpc.NominalSettings{})
	if err != nil {
		return nil, fmt.Errorf("reference: %w", err)
	}
	plant, err := sim.NewPlant(cell, s.Profile)
	if err != nil {
		return nil, fmt.Errorf("simulated cell: %w", err)
	}
	nq := cell.NumJoints()
	q0 := make([]float64, nq)
	cue.PositionTo(q0, startS)
	t0 := startS - float64(s.StandbyTicks)*tick
	if err := plant.Settle(q0, t0); err != nil {
		return nil, fmt.Errorf("simulated cell: %w", err)
	}

	if _, err := c.LoadCue(ctx, CueFile{CellName: cell.Name, CueName: s.CueName, CSV: s.CueCSV, FileName: s.CueFileName}); err != nil {
		return nil, err
	}
	if _, err := c.ArmCue(ctx, cell.Name, s.CueName); err != nil {
		return nil, err
	}
	res = &SimResult{OpenLoop: s.OpenLoop, Checker: NewLimitChecker(cell.JointLimits(), tick), States: map[pb.SessionState]int{}}
	res.Checker.Seed(q0)

	var rec *simRecorder
	if s.CapturePath != "" {
		if rec, err = newSimRecorder(s, cell); err != nil {
			return nil, err
		}
		res.CapturePath = s.CapturePath
		defer func() {
			reason := "cue ended"
			if err != nil {
				reason = "error: " + err.Error()
			}
			if cerr := rec.close(reason, res.Checker.Ticks()); cerr != nil && err == nil {
				err = cerr
			}
		}()
	}

	dctx, cancel := context.WithCancel(ctx)
	defer cancel()
	drive, err := c.Drive(dctx)
	if err != nil {
		return nil, err
	}

	po := sim.NewPlantObservation(cell)
	target := make([]float64, nq)
	refM := make([]float64, 3*len(cell.Markers))
	wall0 := time.Now()
	var sumSq float64
	var lastState pb.SessionState
	live := false
	originS := t0 + float64(s.StandbyTicks)*tick // plant time of the cue's start
	for k := 0; ; k++ {
		if !live && k >= s.StandbyTicks {
			_, err := c.Start(ctx, cell.Name)
			switch {
			case err == nil:
				live = true
				originS = plant.TimeS()
				rec.event(pb.EventKind_EVENT_KIND_OPERATOR, uint64(k), plant.TimeS(), "start")
			case errors.Is(err, ErrFailedPrecondition) && float64(k)*tick < s.MaxStandbyS:
				// Not at rest at the first pose yet: another standby tick.
			default:
				return res, fmt.Errorf("after %d standby ticks: %w", k, err)
			}
		}
		if !s.Fast {
			if d := time.Until(wall0.Add(time.Duration(float64(k) * tick * float64(time.Second)))); d > 0 {
				time.Sleep(d)
			}
		}
		if err := ctx.Err(); err != nil {
			return res, err
		}
		t := plant.TimeS()
		plant.Observe(po)
		obs := &pb.Observation{
			TickSeq:                uint64(k + 1),
			CueTimeS:               t,
			CaptureTimeS:           po.CaptureTimeS,
			MeasuredJointPositions: append([]float64(nil), plant.Joints()...),
		}
		if k == 0 {
			obs.CellName = cell.Name
		}
		for m, mk := range cell.Markers {
			if po.Visible[m] {
				obs.Markers = append(obs.Markers, &pb.MarkerSighting{MarkerId: mk.ID, XM: po.MarkersM[3*m], YM: po.MarkersM[3*m+1], ZM: po.MarkersM[3*m+2]})
			}
		}
		rec.observation(obs)
		sent := time.Now()
		cmd, err := drive.Tick(obs)
		rtt := time.Since(sent)
		if err != nil {
			return res, fmt.Errorf("tick %d at cue time %.3f s: %w", k+1, t, err)
		}
		rec.command(cmd)
		next := cmd.GetNext().GetPositions()
		if len(next) != nq {
			return res, fmt.Errorf("tick %d: the daemon sent %d joint targets; cell %q has %d joints", k+1, len(next), cell.Name, nq)
		}
		res.Checker.Check(cmd.GetTickSeq(), next)
		res.States[cmd.GetState()]++
		lastState = cmd.GetState()
		if s.OpenLoop && live {
			cue.PositionTo(target, t+tick-originS+startS)
		} else {
			copy(target, next)
		}
		if err := plant.Advance(target); err != nil {
			return res, err
		}
		var e float64
		if live {
			tNow := plant.TimeS() - originS + startS
			ref.MarkersTo(refM, tNow)
			x := plant.Nodes()
			for m, mk := range cell.Markers {
				for a := 0; a < 3; a++ {
					d := x[3*mk.Node+a] - refM[3*m+a]
					e += d * d
				}
			}
			e = math.Sqrt(e / float64(len(cell.Markers)))
			sumSq += e * e
			res.Ticks++
			res.TimeS = append(res.TimeS, tNow)
			res.ErrorM = append(res.ErrorM, e)
			res.MaxErrorM = math.Max(res.MaxErrorM, e)
			res.RoundTripS = append(res.RoundTripS, rtt.Seconds())
			res.SolveUs = append(res.SolveUs, cmd.GetSolveTimeUs())
			if len(cmd.GetBoundsActed()) > 0 {
				res.BoundedTicks++
			}
			if cmd.GetError() != nil {
				res.ErrorTicks++
			}
		}
		if s.Progress != nil {
			s.Progress(SimProgress{Tick: uint64(k + 1), CueTimeS: plant.TimeS() - originS + startS, EndS: endS, State: cmd.GetState(), ErrorM: e, Violations: res.Checker.Violations()})
		}
		if live && plant.TimeS()-originS+startS >= endS-1e-9 {
			break
		}
	}
	if res.Ticks > 0 {
		res.RMSErrorM = math.Sqrt(sumSq / float64(res.Ticks))
	}
	// A run cut short (or ended on the cue's last tick) leaves the session
	// playing; stop it so the cell can be armed again.
	if st := lastState; st == pb.SessionState_SESSION_STATE_LIVE || st == pb.SessionState_SESSION_STATE_COAST {
		if _, err := c.Stop(ctx, cell.Name, "simulated run ended"); err != nil {
			return res, err
		}
		rec.event(pb.EventKind_EVENT_KIND_OPERATOR, res.Checker.Ticks(), plant.TimeS(), "stop")
	}
	// End the stream cleanly and wait for the daemon to let go of the
	// cell, so that a following run's stream is not refused as a second
	// controller.
	if err := drive.CloseSend(); err != nil {
		return res, err
	}
	return res, nil
}

// simRecorder writes the simulated cell's side of a session. A nil
// *simRecorder records nothing.
type simRecorder struct {
	w     *capture.Writer
	start time.Time
	err   error
}

// SimRecorderName is SessionStart.recorder in captures written by the
// simulated cell.
const SimRecorderName = "tautline sim 0.1.0"

func newSimRecorder(s SimSettings, cell *sim.Cell) (*simRecorder, error) {
	w, err := capture.Create(s.CapturePath, capture.Settings{})
	if err != nil {
		return nil, err
	}
	now := time.Now()
	recorder := SimRecorderName + " closed-loop"
	if s.OpenLoop {
		recorder = SimRecorderName + " open-loop"
	}
	start := &pb.SessionStart{
		SessionId:   fmt.Sprintf("sim-%d", now.UnixNano()),
		CellName:    cell.Name,
		CueName:     s.CueName,
		StartUnixNs: now.UnixNano(),
		JointNames:  append([]string(nil), cell.JointNames()...),
		TickPeriodS: cell.TickS,
		Recorder:    recorder,
	}
	start.Files = EmbedCellFiles(cell)
	start.Files = append(start.Files, Embed(pb.EmbeddedFileRole_EMBEDDED_FILE_ROLE_CUE, s.CueFileName, s.CueCSV))
	r := &simRecorder{w: w, start: now}
	r.write(&pb.Record{Kind: &pb.Record_SessionStart{SessionStart: start}})
	if r.err != nil {
		w.Close()
		return nil, r.err
	}
	return r, nil
}

func (r *simRecorder) write(rec *pb.Record) {
	if r == nil || r.err != nil {
		return
	}
	rec.SinceStartNs = int64(time.Since(r.start))
	r.err = r.w.Write(rec)
}

func (r *simRecorder) observation(o *pb.Observation) {
	r.write(&pb.Record{Kind: &pb.Record_Observation{Observation: o}})
}

func (r *simRecorder) command(c *pb.Command) {
	r.write(&pb.Record{Kind: &pb.Record_Command{Command: c}})
}

func (r *simRecorder) event(kind pb.EventKind, seq uint64, cueTimeS float64, reason string) {
	r.write(&pb.Record{Kind: &pb.Record_Event{Event: &pb.Event{Kind: kind, TickSeq: seq, CueTimeS: cueTimeS, Reason: reason}}})
}

func (r *simRecorder) close(reason string, ticks uint64) error {
	if r == nil {
		return nil
	}
	r.write(&pb.Record{Kind: &pb.Record_SessionEnd{SessionEnd: &pb.SessionEnd{EndUnixNs: time.Now().UnixNano(), Reason: reason, Ticks: ticks}}})
	cerr := r.w.Close()
	if r.err != nil {
		return fmt.Errorf("capture %s: %w", r.w.Files()[0], r.err)
	}
	return cerr
}
