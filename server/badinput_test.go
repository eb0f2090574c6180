package server

import (
	"context"
	"math"
	"strings"
	"testing"
	"time"

	"tautline/proto/capture"
	pb "tautline/proto/tautline/v1"
)

// badCases break each observation field once. Each gets a plant
// observation that is otherwise good.
var badCases = []struct {
	name  string
	code  pb.TickErrorCode
	field string
	spoil func(o *pb.Observation, p *plant)
}{
	{"other cell", pb.TickErrorCode_TICK_ERROR_CODE_UNKNOWN_CELL, "cell_name",
		func(o *pb.Observation, p *plant) { o.CellName = "another-cell" }},
	{"tick skipped", pb.TickErrorCode_TICK_ERROR_CODE_TICK_SEQ, "tick_seq",
		func(o *pb.Observation, p *plant) { o.TickSeq += 7; p.seq += 7 }},
	{"cue time NaN", pb.TickErrorCode_TICK_ERROR_CODE_NOT_FINITE, "cue_time_s",
		func(o *pb.Observation, p *plant) { o.CueTimeS = math.NaN() }},
	{"cue time +Inf", pb.TickErrorCode_TICK_ERROR_CODE_NOT_FINITE, "cue_time_s",
		func(o *pb.Observation, p *plant) { o.CueTimeS = math.Inf(1) }},
	{"cue time absurd", pb.TickErrorCode_TICK_ERROR_CODE_OUT_OF_RANGE, "cue_time_s",
		func(o *pb.Observation, p *plant) { o.CueTimeS = 2e10; o.CaptureTimeS = 2e10 }},
	{"cue time backwards", pb.TickErrorCode_TICK_ERROR_CODE_TIME_ORDER, "cue_time_s",
		func(o *pb.Observation, p *plant) { o.CueTimeS -= 0.5; o.CaptureTimeS = o.CueTimeS }},
	{"cue time repeated", pb.TickErrorCode_TICK_ERROR_CODE_TIME_ORDER, "cue_time_s",
		func(o *pb.Observation, p *plant) { o.CueTimeS -= p.cell.TickS; o.CaptureTimeS = o.CueTimeS - 0.02 }},
	{"capture time NaN", pb.TickErrorCode_TICK_ERROR_CODE_NOT_FINITE, "capture_time_s",
		func(o *pb.Observation, p *plant) { o.CaptureTimeS = math.NaN() }},
	{"capture time -Inf", pb.TickErrorCode_TICK_ERROR_CODE_NOT_FINITE, "capture_time_s",
		func(o *pb.Observation, p *plant) { o.CaptureTimeS = math.Inf(-1) }},
	{"capture time absurd", pb.TickErrorCode_TICK_ERROR_CODE_OUT_OF_RANGE, "capture_time_s",
		func(o *pb.Observation, p *plant) { o.CaptureTimeS = -2e10 }},
	{"capture after cue time", pb.TickErrorCode_TICK_ERROR_CODE_TIME_ORDER, "capture_time_s",
		func(o *pb.Observation, p *plant) { o.CaptureTimeS = o.CueTimeS + 0.001 }},
	{"capture too old", pb.TickErrorCode_TICK_ERROR_CODE_LATE, "capture_time_s",
		func(o *pb.Observation, p *plant) { o.CaptureTimeS = o.CueTimeS - 5 }},
	{"joints missing", pb.TickErrorCode_TICK_ERROR_CODE_WRONG_SIZE, "measured_joint_positions",
		func(o *pb.Observation, p *plant) { o.MeasuredJointPositions = o.MeasuredJointPositions[:5] }},
	{"joints extra", pb.TickErrorCode_TICK_ERROR_CODE_WRONG_SIZE, "measured_joint_positions",
		func(o *pb.Observation, p *plant) { o.MeasuredJointPositions = append(o.MeasuredJointPositions, 0) }},
	{"joints none", pb.TickErrorCode_TICK_ERROR_CODE_WRONG_SIZE, "measured_joint_positions",
		func(o *pb.Observation, p *plant) { o.MeasuredJointPositions = nil }},
	{"joint NaN", pb.TickErrorCode_TICK_ERROR_CODE_NOT_FINITE, "measured_joint_positions[3]",
		func(o *pb.Observation, p *plant) { o.MeasuredJointPositions[3] = math.NaN() }},
	{"joint -Inf", pb.TickErrorCode_TICK_ERROR_CODE_NOT_FINITE, "measured_joint_positions[11]",
		func(o *pb.Observation, p *plant) { o.MeasuredJointPositions[11] = math.Inf(-1) }},
	{"joint absurd", pb.TickErrorCode_TICK_ERROR_CODE_OUT_OF_RANGE, "measured_joint_positions[2]",
		func(o *pb.Observation, p *plant) { o.MeasuredJointPositions[2] = 1e5 }},
	{"unknown marker", pb.TickErrorCode_TICK_ERROR_CODE_UNKNOWN_MARKER, "markers[1].marker_id",
		func(o *pb.Observation, p *plant) { o.Markers[1].MarkerId = "elbow" }},
	{"empty marker id", pb.TickErrorCode_TICK_ERROR_CODE_UNKNOWN_MARKER, "markers[0].marker_id",
		func(o *pb.Observation, p *plant) { o.Markers[0].MarkerId = "" }},
	{"marker twice", pb.TickErrorCode_TICK_ERROR_CODE_DUPLICATE_MARKER, "markers[4].marker_id",
		func(o *pb.Observation, p *plant) { o.Markers[4].MarkerId = o.Markers[2].MarkerId }},
	{"too many markers", pb.TickErrorCode_TICK_ERROR_CODE_WRONG_SIZE, "markers",
		func(o *pb.Observation, p *plant) { o.Markers = append(o.Markers, o.Markers[0]) }},
	{"marker x NaN", pb.TickErrorCode_TICK_ERROR_CODE_NOT_FINITE, "markers[0].x_m",
		func(o *pb.Observation, p *plant) { o.Markers[0].XM = math.NaN() }},
	{"marker y Inf", pb.TickErrorCode_TICK_ERROR_CODE_NOT_FINITE, "markers[5].y_m",
		func(o *pb.Observation, p *plant) { o.Markers[5].YM = math.Inf(1) }},
	{"marker z -Inf", pb.TickErrorCode_TICK_ERROR_CODE_NOT_FINITE, "markers[9].z_m",
		func(o *pb.Observation, p *plant) { o.Markers[9].ZM = math.Inf(-1) }},
	{"marker x absurd", pb.TickErrorCode_TICK_ERROR_CODE_OUT_OF_RANGE, "markers[3].x_m",
		func(o *pb.Observation, p *plant) { o.Markers[3].XM = -3e4 }},
}

func TestEachBrokenFieldIsAnsweredWithItsError(t *testing.T) {
	cfg := testConfig(t)
	h := startBufconn(t, cfg)
	c := goLive(t, h)
	c.runUntil(pb.SessionState_SESSION_STATE_LIVE, 5)
	sent := 4 // 3 standby ticks and the first live one
	for i := 0; i < 5; i++ {
		c.step()
		sent++
	}
	for _, tc := range badCases {
		obs := c.p.observation()
		tc.spoil(obs, c.p)
		cmd := c.exchange(obs)
		sent++
		c.p.apply(t, cmd)
		e := cmd.GetError()
		if e == nil {
			t.Errorf("%s: no tick error", tc.name)
			continue
		}
		if e.Code != tc.code || e.Field != tc.field || e.Message == "" {
			t.Errorf("%s: error %v %q %q, want %v %q with a message", tc.name, e.Code, e.Field, e.Message, tc.code, tc.field)
		}
		if cmd.State != pb.SessionState_SESSION_STATE_LIVE {
			t.Errorf("%s: one bad tick changed the state to %v", tc.name, cmd.State)
		}
		// A good tick follows, so no run of bad ticks builds up.
		if good := c.step(); good.Error != nil {
			t.Fatalf("%s: the good tick after it has error %v", tc.name, good.Error)
		}
		sent++
	}
	st := h.status()
	if st.RejectedTicks != uint64(len(badCases)) || st.RejectedInRow != 0 {
		t.Fatalf("status counts %d rejected (%d in a row), want %d (0)", st.RejectedTicks, st.RejectedInRow, len(badCases))
	}

	// Bad ticks in a row: the cell coasts after BadTicksToCoast of them.
	for i := 1; i <= cfg.BadTicksToCoast; i++ {
		obs := c.p.observation()
		obs.MeasuredJointPositions[0] = math.NaN()
		cmd := c.exchange(obs)
		sent++
		c.p.apply(t, cmd)
		want := pb.SessionState_SESSION_STATE_LIVE
		if i == cfg.BadTicksToCoast {
			want = pb.SessionState_SESSION_STATE_COAST
		}
		if cmd.State != want {
			t.Fatalf("bad tick %d in a row: state %v, want %v", i, cmd.State, want)
		}
	}
	c.close()

	// Nothing received was lost from the recording: every observation,
	// good or bad, and every command.
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	if err := h.srv.Shutdown(ctx); err != nil {
		t.Fatal(err)
	}
	recs, _, err := capture.ReadFile(capturesIn(t, cfg.CaptureDir)[0])
	if err != nil {
		t.Fatal(err)
	}
	var obs, cmds, withErr int
	for _, r := range recs {
		if r.GetObservation() != nil {
			obs++
		}
		if c := r.GetCommand(); c != nil {
			cmds++
			if c.Error != nil {
				withErr++
			}
		}
	}
	if obs != sent || cmds != sent || withErr != len(badCases)+cfg.BadTicksToCoast {
		t.Fatalf("capture: %d observations, %d commands (%d with errors); sent %d, %d bad", obs, cmds, withErr, sent, len(badCases)+cfg.BadTicksToCoast)
	}
}

func TestObservationWithNoCueArmed(t *testing.T) {
	h := startBufconn(t, testConfig(t))
	c := h.connect(newPlant(t, h.cell))
	cmd := c.step()
	e := cmd.GetError()
	if e == nil || e.Code != pb.TickErrorCode_TICK_ERROR_CODE_NO_CUE_ARMED || !strings.Contains(e.Message, "ArmCue") {
		t.Fatalf("idle tick error %v", e)
	}
	if cmd.State != pb.SessionState_SESSION_STATE_IDLE {
		t.Fatalf("state %v", cmd.State)
	}
	// Idle commands hold the measured joints.
	for j, v := range cmd.Next.Positions {
		if v != c.p.q[j] {
			t.Fatalf("idle target %v differs from the measured joints %v", cmd.Next.Positions, c.p.q)
		}
	}
	c.close()
}
