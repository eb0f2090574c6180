package client

import (
	"context"
	"fmt"
	"math"
	"time"

	pb "tautline/proto/tautline/v1"
)

// ReplaySettings configures Replay. The zero value replays at the
// recorded timing under the cue name "<recorded>-replay".
type ReplaySettings struct {
	// Fast sends each observation as soon as the previous command came
	// back instead of at the recorded times.
	Fast bool
	// CueName to load the embedded cue under; "" means the recorded cue
	// name with "-replay" appended.
	CueName string
}

// ReplayResult compares the daemon's commands in a dry-run with the
// recorded ones.
type ReplayResult struct {
	Ticks int // observations sent
	// Compared counts ticks with both a recorded and a replayed command.
	Compared int
	// MaxDiff and RMSDiff are, per joint, the largest and the root mean
	// square difference between replayed and recorded next targets (rad,
	// or m for prismatic joints).
	MaxDiff, RMSDiff []float64
	// StateMismatches counts ticks whose replayed state differs from the
	// recorded one.
	StateMismatches int
	// RecordedBoundTicks and ReplayedBoundTicks count ticks on which the
	// guard acted.
	RecordedBoundTicks, ReplayedBoundTicks int
	// RoundTripS is each replayed tick's round trip; RecordedLatencyS the
	// recorded observation-to-command times.
	RoundTripS, RecordedLatencyS []float64
	// Checker is the independent limit check of the replayed commands.
	Checker *LimitChecker
	// Started says whether the cue was started where the recording
	// started it.
	Started bool
}

// MaxAbsDiff is the largest of MaxDiff.
func (r *ReplayResult) MaxAbsDiff() float64 {
	m := 0.0
	for _, d := range r.MaxDiff {
		m = math.Max(m, d)
	}
	return m
}

// Replay streams run's observations to the daemon behind c and compares
// its commands with the recorded ones. It loads and arms the embedded cue
// and calls Start just before the observation that was first answered live
// in the recording, as the recording's controller did. The daemon must
// serve the capture's cell, be otherwise idle, and (for identical commands)
// be the same build with a fresh session: the core is deterministic, so
// commands then agree to the last bit unless the daemon's time budget cut
// the planner's iterations differently.
func Replay(ctx context.Context, c *Client, run *CaptureRun, s ReplaySettings) (*ReplayResult, error) {
	cell := run.Cell
	name := s.CueName
	if name == "" {
		name = run.Start.GetCueName() + "-replay"
	}
	if _, err := c.LoadCue(ctx, CueFile{CellName: cell.Name, CueName: name, CSV: run.Embedded.CueCSV, FileName: run.Embedded.CueName}); err != nil {
		return nil, err
	}
	if _, err := c.ArmCue(ctx, cell.Name, name); err != nil {
		return nil, err
	}
	nq := cell.NumJoints()
	res := &ReplayResult{MaxDiff: make([]float64, nq), RMSDiff: make([]float64, nq), Checker: NewLimitChecker(cell.JointLimits(), cell.TickS)}
	dctx, cancel := context.WithCancel(ctx)
	defer cancel()
	drive, err := c.Drive(dctx)
	if err != nil {
		return nil, err
	}
	var lastState pb.SessionState
	wall0 := time.Now()
	var t0Ns int64
	for i, tk := range run.Ticks {
		if i == 0 {
			t0Ns = tk.ObsNs
			if q := tk.Obs.GetMeasuredJointPositions(); len(q) == nq {
				res.Checker.Seed(q)
			}
		}
		if i == run.LiveFrom {
			if _, err := c.Start(ctx, cell.Name); err != nil {
				return res, fmt.Errorf("Start before tick %d, where the recording started the cue: %w", tk.Obs.GetTickSeq(), err)
			}
			res.Started = true
		}
		if !s.Fast {
			if d := time.Until(wall0.Add(time.Duration(tk.ObsNs - t0Ns))); d > 0 {
				time.Sleep(d)
			}
		}
		obs := tk.Obs
		if i == 0 && obs.GetCellName() == "" {
			obs = cloneObs(obs)
			obs.CellName = cell.Name
		}
		sent := time.Now()
		cmd, err := drive.Tick(obs)
		if err != nil {
			return res, fmt.Errorf("tick %d: %w", obs.GetTickSeq(), err)
		}
		res.RoundTripS = append(res.RoundTripS, time.Since(sent).Seconds())
		res.Ticks++
		lastState = cmd.GetState()
		next := cmd.GetNext().GetPositions()
		if len(next) == nq {
			res.Checker.Check(cmd.GetTickSeq(), next)
		}
		if len(cmd.GetBoundsActed()) > 0 {
			res.ReplayedBoundTicks++
		}
		if tk.Cmd == nil {
			continue
		}
		res.RecordedLatencyS = append(res.RecordedLatencyS, float64(tk.CmdNs-tk.ObsNs)*1e-9)
		if len(tk.Cmd.GetBoundsActed()) > 0 {
			res.RecordedBoundTicks++
		}
		if tk.Cmd.GetState() != cmd.GetState() {
			res.StateMismatches++
		}
		was := tk.Cmd.GetNext().GetPositions()
		if len(was) != nq || len(next) != nq {
			continue
		}
		res.Compared++
		for j := range next {
			d := math.Abs(next[j] - was[j])
			if math.IsNaN(d) {
				d = math.Inf(1)
			}
			res.MaxDiff[j] = math.Max(res.MaxDiff[j], d)
			res.RMSDiff[j] += d * d
		}
	}
	for j := range res.RMSDiff {
		if res.Compared > 0 {
			res.RMSDiff[j] = math.Sqrt(res.RMSDiff[j] / float64(res.Compared))
		}
	}
	if lastState == pb.SessionState_SESSION_STATE_LIVE || lastState == pb.SessionState_SESSION_STATE_COAST {
		if _, err := c.Stop(ctx, cell.Name, "replay ended"); err != nil {
			return res, err
		}
	}
	if err := drive.CloseSend(); err != nil {
		return res, err
	}
	return res, nil
}

func cloneObs(o *pb.Observation) *pb.Observation {
	return &pb.Observation{
		CellName: o.GetCellName(), TickSeq: o.GetTickSeq(), CueTimeS: o.GetCueTimeS(), CaptureTimeS: o.GetCaptureTimeS(),
		MeasuredJointPositions: o.GetMeasuredJointPositions(), Markers: o.GetMarkers(),
	}
}
