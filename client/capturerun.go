package client

import (
	"fmt"
	"math"
	"path/filepath"
	"strings"

	"tautline/mpc"
	"tautline/proto/capture"
	pb "tautline/proto/tautline/v1"
	"tautline/sim"
)

// CaptureTick is one tick of a capture: the observation, the command that
// answered it (nil if none was recorded), and when each was recorded, ns
// since the session started on the recorder's clock.
type CaptureTick struct {
	Obs          *pb.Observation
	Cmd          *pb.Command
	ObsNs, CmdNs int64
}

// CaptureRun is a capture read back with what it needs to be understood:
// its embedded cell and cue, the reference (the cue simulated on the
// cell's nominal model, as the daemon tracks it), and its ticks in order.
type CaptureRun struct {
	Path     string
	Start    *pb.SessionStart
	Embedded *Embedded
	Cell     *sim.Cell
	Cue      *mpc.Cue
	Ref      *mpc.Nominal
	Ticks    []CaptureTick
	Events   []*pb.Event
	End      *pb.SessionEnd // nil if the capture has none (torn)
	Damage   *capture.Damage

	// LiveFrom is the index in Ticks of the first tick answered live (the
	// cue's start), -1 if the cue never started; OriginS is that tick's
	// observation cue_time_s, the controller clock's cue start.
	LiveFrom int
	OriginS  float64
}

// ReadCaptureRun reads the capture at path and loads what it embeds.
func ReadCaptureRun(path string) (*CaptureRun, error) {
	recs, damage, err := capture.ReadFile(path)
	if err != nil {
		return nil, err
	}
	if len(recs) == 0 {
		return nil, fmt.Errorf("%s: no records", path)
	}
	start := recs[0].GetSessionStart()
	if start == nil {
		return nil, fmt.Errorf("%s: the first record is a %s, not the session start", path, capture.KindName(recs[0]))
	}
	emb, err := EmbeddedFiles(start)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	cell, err := emb.Cell()
	if err != nil {
		return nil, fmt.Errorf("%s: embedded cell: %w", path, err)
	}
	cue, err := mpc.ParseCue(emb.CueName, emb.CueCSV, mpc.CueJointsOf(cell), mpc.CueSettings{TickS: cell.TickS})
	if err != nil {
		return nil, fmt.Errorf("%s: embedded cue: %w", path, err)
	}
	ref, err := mpc.SimulateNominal(cell, cue, cue.StartS(), cue.EndS(), mpc.NominalSettings{})
	if err != nil {
		return nil, fmt.Errorf("%s: reference: %w", path, err)
	}
	r := &CaptureRun{Path: path, Start: start, Embedded: emb, Cell: cell, Cue: cue, Ref: ref, Damage: damage, LiveFrom: -1}
	bySeq := map[uint64]int{}
	for _, rec := range recs[1:] {
		switch k := rec.GetKind().(type) {
		case *pb.Record_Observation:
			bySeq[k.Observation.GetTickSeq()] = len(r.Ticks)
			r.Ticks = append(r.Ticks, CaptureTick{Obs: k.Observation, ObsNs: rec.GetSinceStartNs()})
		case *pb.Record_Command:
			i, ok := bySeq[k.Command.GetTickSeq()]
			if !ok || r.Ticks[i].Cmd != nil {
				continue // a command without its observation (part boundary)
			}
			r.Ticks[i].Cmd, r.Ticks[i].CmdNs = k.Command, rec.GetSinceStartNs()
			if r.LiveFrom < 0 && k.Command.GetState() == pb.SessionState_SESSION_STATE_LIVE {
				r.LiveFrom = i
				r.OriginS = r.Ticks[i].Obs.GetCueTimeS()
			}
		case *pb.Record_Event:
			r.Events = append(r.Events, k.Event)
		case *pb.Record_SessionEnd:
			r.End = k.SessionEnd
		}
	}
	return r, nil
}

// Label names the run for legends: "open-loop" or "closed-loop" for
// captures of tautline sim, else the file's base name.
func (r *CaptureRun) Label() string {
	rec := r.Start.GetRecorder()
	if strings.HasPrefix(rec, SimRecorderName+" ") {
		return strings.TrimPrefix(rec, SimRecorderName+" ")
	}
	return strings.TrimSuffix(filepath.Base(r.Path), filepath.Ext(r.Path))
}

// CueTimeS maps a controller-clock time of the run to cue time.
func (r *CaptureRun) CueTimeS(controllerS float64) float64 {
	return controllerS - r.OriginS + r.Cue.StartS()
}

// ObservedError is the figure error as the tracker saw it: for every tick
// from the cue's start to its end, the root mean square over the visible
// markers of the distance between the observed marker (tracker frame
// mapped to the world) and the reference at the marker's capture time, m.
// It includes the tracker's noise; ticks with no visible marker are left
// out. Times are cue times of capture.
func (r *CaptureRun) ObservedError() (timeS, errM []float64) {
	if r.LiveFrom < 0 {
		return nil, nil
	}
	index := map[string]int{}
	for i, m := range r.Cell.Markers {
		index[m.ID] = i
	}
	ref := make([]float64, 3*len(r.Cell.Markers))
	for _, tk := range r.Ticks[r.LiveFrom:] {
		tc := r.CueTimeS(tk.Obs.GetCaptureTimeS())
		if tc < r.Cue.StartS()-1e-9 {
			continue
		}
		if tc > r.Cue.EndS()+1e-9 {
			break
		}
		r.Ref.MarkersTo(ref, tc)
		var sum float64
		n := 0
		for _, m := range tk.Obs.GetMarkers() {
			i, ok := index[m.GetMarkerId()]
			if !ok {
				continue
			}
			w := r.Cell.TrackerToWorld.Apply([3]float64{m.GetXM(), m.GetYM(), m.GetZM()})
			for a := 0; a < 3; a++ {
				d := w[a] - ref[3*i+a]
				sum += d * d
			}
			n++
		}
		if n == 0 {
			continue
		}
		timeS = append(timeS, tc)
		errM = append(errM, math.Sqrt(sum/float64(n)))
	}
	return timeS, errM
}

// RecordedLatencyS is, for every tick with a command, the time between
// the recorder writing the observation and the command: on a tautline sim
// capture the controller's round trip, on a daemon's capture its compute
// time, s.
func (r *CaptureRun) RecordedLatencyS() []float64 {
	var out []float64
	for _, tk := range r.Ticks {
		if tk.Cmd != nil {
			out = append(out, float64(tk.CmdNs-tk.ObsNs)*1e-9)
		}
	}
	return out
}

// CheckLimits runs the independent LimitChecker over every recorded
// command, seeded with the first observation's measured joints at rest.
func (r *CaptureRun) CheckLimits() *LimitChecker {
	c := NewLimitChecker(r.Cell.JointLimits(), r.Cell.TickS)
	seeded := false
	for _, tk := range r.Ticks {
		if !seeded {
			if q := tk.Obs.GetMeasuredJointPositions(); len(q) == r.Cell.NumJoints() {
				c.Seed(q)
			}
			seeded = true
		}
		if tk.Cmd != nil && len(tk.Cmd.GetNext().GetPositions()) == r.Cell.NumJoints() {
			c.Check(tk.Cmd.GetTickSeq(), tk.Cmd.GetNext().GetPositions())
		}
	}
	return c
}

// RMS is the root mean square of xs (0 for none).
func RMS(xs []float64) float64 {
	if len(xs) == 0 {
		return 0
	}
	var s float64
	for _, x := range xs {
		s += x * x
	}
	return math.Sqrt(s / float64(len(xs)))
}
