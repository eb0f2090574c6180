package server

import (
	"math"
	"os"
	"testing"
	"time"

	"go.uber.org/zap"

	pb "tautline/proto/tautline/v1"
	"tautline/sim"
)

// newLiveHost builds a cell host for the demo cell without gRPC, loads
// and arms the demo cue, answers a few standby ticks from a plant and
// starts the cue. The host's capture is closed at cleanup.
func newLiveHost(t testing.TB) (*cellHost, *plant, *commandSlot) {
	t.Helper()
	cfg := testConfig(t)
	srvCell := mustLoadDemoCell(t)
	h, err := newCellHost(srvCell, &cfg, zap.NewNop(), NewMetrics())
	if err != nil {
		t.Fatal(err)
	}
	lc, err := loadCue(srvCell, &pb.LoadCueRequest{CellName: srvCell.Name, CueName: "demo", CueCsv: readFile(t, demoCuePath)})
	if err != nil {
		t.Fatal(err)
	}
	if err := h.storeCue(lc); err != nil {
		t.Fatal(err)
	}
	if _, err := h.arm("demo"); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { h.shutdown("test over") })
	h.eng.streamOpened()
	p := newPlant(t, srvCell)
	slot := newCommandSlot(srvCell.NumJoints())
	for i := 0; i < 3; i++ {
		h.eng.tick(p.observation(), time.Now(), slot)
		p.apply(t, &slot.cmd)
	}
	if _, err := h.start(); err != nil {
		t.Fatal(err)
	}
	return h, p, slot
}

func mustLoadDemoCell(t testing.TB) *sim.Cell {
	t.Helper()
	c, err := sim.LoadCell(demoCellPath, os.ReadFile)
	if err != nil {
		t.Fatal(err)
	}
	return c
}

// fill writes the plant's observation into obs in place, reusing its
// slices, so that a steady-state tick can be measured for allocations.
func (p *plant) fill(obs *pb.Observation) {
	obs.CellName = p.cell.Name
	obs.TickSeq = p.seq
	obs.CueTimeS = p.t
	obs.CaptureTimeS = p.t - p.latencyS
	obs.MeasuredJointPositions = append(obs.MeasuredJointPositions[:0], p.q...)
	if len(obs.Markers) != len(p.cell.Markers) {
		obs.Markers = make([]*pb.MarkerSighting, len(p.cell.Markers))
		for i := range obs.Markers {
			obs.Markers[i] = &pb.MarkerSighting{}
		}
	}
	for i, m := range p.cell.Markers {
		n := 3 * m.Node
		obs.Markers[i].MarkerId, obs.Markers[i].XM, obs.Markers[i].YM, obs.Markers[i].ZM = m.ID, p.x[n], p.x[n+1], p.x[n+2]
	}
}

// TestLiveTickAllocatesNothing: the whole per-tick path of a live session
// (validation, estimator, planner feedback, guard, preview, command,
// capture records, then the next tick's prepare) allocates nothing in
// steady state.
func TestLiveTickAllocatesNothing(t *testing.T) {
	h, p, slot := newLiveHost(t)
	obs := &pb.Observation{}
	run := func() {
		p.fill(obs)
		h.mu.Lock()
		h.eng.tick(obs, time.Now(), slot)
		h.eng.prepareNext()
		h.mu.Unlock()
		p.apply(t, &slot.cmd)
	}
	for i := 0; i < 20; i++ {
		run()
	}
	if slot.cmd.State != pb.SessionState_SESSION_STATE_LIVE || slot.cmd.Error != nil {
		t.Fatalf("not a clean live tick: %v", &slot.cmd)
	}
	if a := testing.AllocsPerRun(50, run); a != 0 {
		t.Fatalf("a live tick allocates %v times", a)
	}
}

// FuzzObservation feeds arbitrary observations to a live session. Whatever
// comes in, every command must pass the independent limit check against
// the commands before it, and the tick must not panic.
func FuzzObservation(f *testing.F) {
	f.Add(uint64(0), 0.0, 0.0, 12, -1, 0.0, 10, -1, "", 0.0, 0.0, 0.0, "")
	f.Add(uint64(7), 0.0, 0.0, 12, -1, 0.0, 10, -1, "", 0.0, 0.0, 0.0, "")
	f.Add(uint64(0), math.NaN(), 0.0, 12, -1, 0.0, 10, -1, "", 0.0, 0.0, 0.0, "")
	f.Add(uint64(0), -0.5, -0.5, 12, -1, 0.0, 10, -1, "", 0.0, 0.0, 0.0, "")
	f.Add(uint64(0), 0.0, 0.03, 12, -1, 0.0, 10, -1, "", 0.0, 0.0, 0.0, "")
	f.Add(uint64(0), 0.0, -3.0, 12, -1, 0.0, 10, -1, "", 0.0, 0.0, 0.0, "")
	f.Add(uint64(0), 0.0, 0.0, 5, -1, 0.0, 10, -1, "", 0.0, 0.0, 0.0, "")
	f.Add(uint64(0), 0.0, 0.0, 12, 3, math.Inf(1), 10, -1, "", 0.0, 0.0, 0.0, "")
	f.Add(uint64(0), 0.0, 0.0, 12, 3, 1e6, 10, -1, "", 0.0, 0.0, 0.0, "")
	f.Add(uint64(0), 0.0, 0.0, 12, -1, 0.0, 10, 1, "elbow", 0.0, 0.0, 0.0, "")
	f.Add(uint64(0), 0.0, 0.0, 12, -1, 0.0, 11, -1, "", 0.0, 0.0, 0.0, "")
	f.Add(uint64(0), 0.0, 0.0, 12, -1, 0.0, 10, 2, "crown", 0.0, 0.0, 0.0, "")
	f.Add(uint64(0), 0.0, 0.0, 12, -1, 0.0, 10, 0, "crown", math.NaN(), 0.0, 0.0, "")
	f.Add(uint64(0), 0.0, 0.0, 12, -1, 0.0, 10, 0, "crown", 50.0, -50.0, 1e9, "")
	f.Add(uint64(0), 0.0, 0.0, 12, -1, 0.0, 0, -1, "", 0.0, 0.0, 0.0, "")
	f.Add(uint64(0), 0.0, 0.0, 12, -1, 0.0, 10, -1, "", 0.0, 0.0, 0.0, "other")
	// A clock far out, where a float64 cannot tell ticks apart, and a jump
	// the estimator must not predict across step by step (both once hung
	// the tick).
	f.Add(uint64(0), 1e18, 1e18, 12, -1, 0.0, 10, -1, "", 0.0, 0.0, 0.0, "")
	f.Add(uint64(0), 1e5, 1e5, 12, -1, 0.0, 10, -1, "", 0.0, 0.0, 0.0, "")
	f.Add(uint64(0), 0.0, 0.0, 12, 0, 1e300, 10, -1, "", 0.0, 0.0, 0.0, "")

	h, p, _ := newLiveHost(f)
	lc := newLimitChecker(p.cell)
	slot := newCommandSlot(p.cell.NumJoints())
	f.Fuzz(func(t *testing.T, seqSkip uint64, dCue, dCapture float64, nJoints, joint int, jointValue float64,
		nMarkers, marker int, markerID string, mx, my, mz float64, cellName string) {
		obs := p.observation()
		obs.TickSeq += seqSkip
		obs.CueTimeS += dCue
		obs.CaptureTimeS += dCapture
		if nJoints >= 0 && nJoints < 64 {
			for len(obs.MeasuredJointPositions) < nJoints {
				obs.MeasuredJointPositions = append(obs.MeasuredJointPositions, 0)
			}
			obs.MeasuredJointPositions = obs.MeasuredJointPositions[:nJoints]
		}
		if joint >= 0 && joint < len(obs.MeasuredJointPositions) {
			obs.MeasuredJointPositions[joint] = jointValue
		}
		if nMarkers >= 0 && nMarkers < 64 {
			for len(obs.Markers) < nMarkers {
				obs.Markers = append(obs.Markers, &pb.MarkerSighting{MarkerId: "crown"})
			}
			obs.Markers = obs.Markers[:nMarkers]
		}
		if marker >= 0 && marker < len(obs.Markers) {
			m := obs.Markers[marker]
			m.MarkerId, m.XM, m.YM, m.ZM = markerID, m.XM+mx, m.YM+my, m.ZM+mz
		}
		if cellName != "" {
			obs.CellName = cellName
		}
		h.mu.Lock()
		h.eng.tick(obs, time.Now(), slot)
		h.eng.prepareNext()
		h.mu.Unlock()
		if slot.cmd.TickSeq != obs.TickSeq {
			t.Fatalf("command answers %d, observation was %d", slot.cmd.TickSeq, obs.TickSeq)
		}
		lc.check(t, "fuzzed tick", slot.cmd.Next.Positions)
		if e := slot.cmd.Error; e != nil && (e.Message == "" || e.Code == pb.TickErrorCode_TICK_ERROR_CODE_UNSPECIFIED) {
			t.Fatalf("tick error without code or message: %v", e)
		}
		// The plant follows the command; its clock and counter go on from
		// whatever the daemon accepted last.
		p.apply(t, &slot.cmd)
		p.seq = obs.TickSeq + 1
		if e := slot.cmd.Error; e == nil {
			p.t = obs.CueTimeS + p.cell.TickS
		}
	})
}

// BenchmarkLiveTick is the daemon's own work per live tick on the demo
// cell, without gRPC: the feedback path (validate, estimator, planner
// feedback, guard, preview, command and capture records) and, separately
// timed, the next tick's prepare phase. One op is one tick.
func BenchmarkLiveTick(b *testing.B) {
	h, p, slot := newLiveHost(b)
	obs := &pb.Observation{}
	var feedback, prepare time.Duration
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		b.StopTimer()
		p.fill(obs)
		b.StartTimer()
		t0 := time.Now()
		h.mu.Lock()
		h.eng.tick(obs, t0, slot)
		t1 := time.Now()
		h.eng.prepareNext()
		h.mu.Unlock()
		t2 := time.Now()
		feedback += t1.Sub(t0)
		prepare += t2.Sub(t1)
		b.StopTimer()
		if slot.cmd.State == pb.SessionState_SESSION_STATE_STANDBY {
			b.Fatal("the cue ended; the benchmark needs a live session (use fewer ticks)")
		}
		p.apply(b, &slot.cmd)
		b.StartTimer()
	}
	b.ReportMetric(float64(feedback.Microseconds())/float64(b.N), "feedback-µs/tick")
	b.ReportMetric(float64(prepare.Microseconds())/float64(b.N), "prepare-µs/tick")
}
