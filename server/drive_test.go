package server

import (
	"context"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"tautline/proto/capture"
	pb "tautline/proto/tautline/v1"
)

type driveClient = grpc.BidiStreamingClient[pb.Observation, pb.Command]

// controller is a test cell controller: one stream, a plant, and an
// independent limit check on every command it receives.
type controller struct {
	t      testing.TB
	stream driveClient
	cancel context.CancelFunc
	p      *plant
	lc     *limitChecker
	last   *pb.Command
}

func (h *harness) connect(p *plant) *controller {
	h.t.Helper()
	ctx, cancel := context.WithCancel(context.Background())
	stream, err := h.client.Drive(ctx)
	if err != nil {
		cancel()
		h.t.Fatal(err)
	}
	c := &controller{t: h.t, stream: stream, cancel: cancel, p: p, lc: newLimitChecker(h.cell)}
	h.t.Cleanup(func() { cancel() })
	return c
}

// exchange sends obs and returns the command that answers it.
func (c *controller) exchange(obs *pb.Observation) *pb.Command {
	c.t.Helper()
	if err := c.stream.Send(obs); err != nil {
		c.t.Fatalf("send tick %d: %v", obs.TickSeq, err)
	}
	cmd, err := c.stream.Recv()
	if err != nil {
		c.t.Fatalf("receive tick %d: %v", obs.TickSeq, err)
	}
	if cmd.TickSeq != obs.TickSeq {
		c.t.Fatalf("command answers tick %d, sent %d", cmd.TickSeq, obs.TickSeq)
	}
	c.lc.check(c.t, "next", cmd.GetNext().GetPositions())
	c.last = cmd
	return cmd
}

// step runs one plant tick: observe, exchange, apply.
func (c *controller) step() *pb.Command {
	c.t.Helper()
	cmd := c.exchange(c.p.observation())
	c.p.apply(c.t, cmd)
	return cmd
}

// runUntil steps until the command's state is want, at most n ticks.
func (c *controller) runUntil(want pb.SessionState, n int) *pb.Command {
	c.t.Helper()
	for i := 0; i < n; i++ {
		if cmd := c.step(); cmd.State == want {
			return cmd
		}
	}
	c.t.Fatalf("state %v not reached in %d ticks; last command: %v", want, n, c.last)
	return nil
}

func (c *controller) close() {
	c.stream.CloseSend()
	for {
		if _, err := c.stream.Recv(); err != nil {
			break
		}
	}
	c.cancel()
}

// goLive connects, arms the demo cue, waits in standby and starts it.
func goLive(t *testing.T, h *harness) *controller {
	t.Helper()
	h.loadAndArm()
	c := h.connect(newPlant(t, h.cell))
	for i := 0; i < 3; i++ {
		if cmd := c.step(); cmd.State != pb.SessionState_SESSION_STATE_STANDBY || cmd.Error != nil {
			t.Fatalf("standby tick %d: %v", i, cmd)
		}
	}
	if _, err := h.client.Start(h.ctx(), &pb.StartRequest{CellName: h.cell.Name}); err != nil {
		t.Fatal(err)
	}
	return c
}

func TestLiveCueIsCorrectedWithinLimitsAndRecorded(t *testing.T) {
	cfg := testConfig(t)
	h := startBufconn(t, cfg)
	c := goLive(t, h)
	const ticks = 60
	for i := 0; i < ticks; i++ {
		cmd := c.step()
		if cmd.State != pb.SessionState_SESSION_STATE_LIVE {
			t.Fatalf("tick %d: state %v, want live (error %v)", i, cmd.State, cmd.Error)
		}
		if cmd.Error != nil {
			t.Fatalf("tick %d: unexpected tick error %v", i, cmd.Error)
		}
		if len(cmd.Preview) != previewTicks {
			t.Fatalf("tick %d: %d preview entries, want %d", i, len(cmd.Preview), previewTicks)
		}
		if want := c.p.t; !near(cmd.Next.CueTimeS, want, 1e-9) {
			t.Fatalf("tick %d: next targets for %v, want the next tick %v", i, cmd.Next.CueTimeS, want)
		}
	}
	st := h.status()
	if st.State != pb.SessionState_SESSION_STATE_LIVE || !st.ControllerConnected || st.SessionId == "" {
		t.Fatalf("status %v", st)
	}
	c.close()

	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	if err := h.srv.Shutdown(ctx); err != nil {
		t.Fatal(err)
	}
	files := capturesIn(t, cfg.CaptureDir)
	if len(files) != 1 {
		t.Fatalf("captures %v, want one", files)
	}
	recs, dmg, err := capture.ReadFile(files[0])
	if err != nil || dmg != nil {
		t.Fatalf("reading capture: %v, damage %v", err, dmg)
	}
	start := recs[0].GetSessionStart()
	if start == nil || start.SessionId != st.SessionId || start.CueName != "demo" {
		t.Fatalf("first record %v", recs[0])
	}
	roles := map[pb.EmbeddedFileRole]int{}
	for _, f := range start.Files {
		roles[f.Role]++
	}
	if roles[pb.EmbeddedFileRole_EMBEDDED_FILE_ROLE_CELL] != 1 || roles[pb.EmbeddedFileRole_EMBEDDED_FILE_ROLE_FIGURE] != 1 ||
		roles[pb.EmbeddedFileRole_EMBEDDED_FILE_ROLE_URDF] < 1 || roles[pb.EmbeddedFileRole_EMBEDDED_FILE_ROLE_CUE] != 1 {
		t.Fatalf("embedded files by role %v", roles)
	}
	var obs, cmds int
	for _, r := range recs {
		switch {
		case r.GetObservation() != nil:
			obs++
		case r.GetCommand() != nil:
			cmds++
		}
	}
	if want := ticks + 3; obs != want || cmds != want {
		t.Fatalf("capture holds %d observations and %d commands, want %d each", obs, cmds, want)
	}
	if end := recs[len(recs)-1].GetSessionEnd(); end == nil || end.Ticks != uint64(ticks+3) {
		t.Fatalf("last record %v, want a session end with %d ticks", recs[len(recs)-1], ticks+3)
	}
}

func near(a, b, tol float64) bool { return a-b <= tol && b-a <= tol }

func TestSecondControllerIsRefused(t *testing.T) {
	h := startBufconn(t, testConfig(t))
	h.loadAndArm()
	c := h.connect(newPlant(t, h.cell))
	c.step()
	second := h.connect(newPlant(t, h.cell))
	if err := second.stream.Send(second.p.observation()); err != nil {
		t.Fatal(err)
	}
	_, err := second.stream.Recv()
	if status.Code(err) != codes.AlreadyExists {
		t.Fatalf("second controller: %v, want AlreadyExists", err)
	}
	// The first stream is unaffected.
	if cmd := c.step(); cmd.State != pb.SessionState_SESSION_STATE_STANDBY {
		t.Fatalf("first stream after the refusal: %v", cmd)
	}
	c.close()
}

func TestUnknownCellEndsTheStream(t *testing.T) {
	h := startBufconn(t, testConfig(t))
	c := h.connect(newPlant(t, h.cell))
	obs := c.p.observation()
	obs.CellName = "no-such-cell"
	if err := c.stream.Send(obs); err != nil {
		t.Fatal(err)
	}
	if _, err := c.stream.Recv(); status.Code(err) != codes.NotFound {
		t.Fatalf("unknown cell: %v, want NotFound", err)
	}
}

func TestStallGoesToCoastWithinTheTimeout(t *testing.T) {
	cfg := testConfig(t)
	cfg.StallTimeoutS = 0.1
	h := startBufconn(t, cfg)
	c := goLive(t, h)
	c.runUntil(pb.SessionState_SESSION_STATE_LIVE, 5)
	stalled := time.Now() // just before the last observation is sent
	c.step()
	// Silence: the stream must end with DeadlineExceeded and the cell
	// coast. The bound on when is the timeout plus scheduling slack on a
	// loaded 2-core machine (common practice: a generous factor, since
	// this is a correctness check, not a timing figure).
	_, err := c.stream.Recv()
	waited := time.Since(stalled)
	if status.Code(err) != codes.DeadlineExceeded {
		t.Fatalf("stalled stream ended with %v, want DeadlineExceeded", err)
	}
	if waited < 100*time.Millisecond || waited > 2*time.Second {
		t.Fatalf("stream ended %v after the last observation; the timeout is 100 ms", waited)
	}
	st := h.status()
	if st.State != pb.SessionState_SESSION_STATE_COAST || st.ControllerConnected {
		t.Fatalf("after the stall: %v", st)
	}
}

func TestStallGoesToHoldWhenConfigured(t *testing.T) {
	cfg := testConfig(t)
	cfg.StallTimeoutS = 0.05
	cfg.OnControllerLoss = "hold"
	h := startBufconn(t, cfg)
	c := goLive(t, h)
	c.runUntil(pb.SessionState_SESSION_STATE_LIVE, 5)
	if _, err := c.stream.Recv(); status.Code(err) != codes.DeadlineExceeded {
		t.Fatalf("stalled stream ended with %v", err)
	}
	if st := h.status(); st.State != pb.SessionState_SESSION_STATE_HOLD {
		t.Fatalf("after the stall: %v, want hold", st.State)
	}
}

func TestReconnectAfterDropResumesThroughCoast(t *testing.T) {
	cfg := testConfig(t)
	cfg.RecoverTicks = 5
	h := startBufconn(t, cfg)
	c := goLive(t, h)
	c.runUntil(pb.SessionState_SESSION_STATE_LIVE, 5)
	for i := 0; i < 10; i++ {
		c.step()
	}
	p := c.p
	c.cancel() // the connection drops
	deadline := time.Now().Add(5 * time.Second)
	for h.status().ControllerConnected {
		if time.Now().After(deadline) {
			t.Fatal("the daemon did not notice the dropped stream")
		}
		time.Sleep(5 * time.Millisecond)
	}
	if st := h.status(); st.State != pb.SessionState_SESSION_STATE_COAST {
		t.Fatalf("after the drop: %v, want coast", st.State)
	}
	// The controller comes back with its clock running on and the arms
	// where they were; the tick counter restarts with the stream.
	p.t += 0.3
	p.seq = 0
	c2 := h.connect(p)
	c2.lc = c.lc // one limit check across the reconnect
	c2.lc.n = 0  // the arms did not move while disconnected; the history restarts
	cmd := c2.step()
	if cmd.State != pb.SessionState_SESSION_STATE_COAST || cmd.Error != nil {
		t.Fatalf("first tick after reconnecting: %v", cmd)
	}
	cmd = c2.runUntil(pb.SessionState_SESSION_STATE_LIVE, cfg.RecoverTicks+2)
	if cmd.Error != nil {
		t.Fatalf("back live with an error: %v", cmd.Error)
	}
	c2.close()
}

func TestHoldDeceleratesToRestWithinLimits(t *testing.T) {
	h := startBufconn(t, testConfig(t))
	c := goLive(t, h)
	// Play into the cue until some joint moves at a good fraction of its
	// speed limit (the demo cue moves from about 1.5 s).
	moving := false
	for i := 0; i < 400 && !moving; i++ {
		c.step()
		moving = c.lc.n > 2 && c.lc.speed() > 0.05
	}
	if !moving {
		t.Fatal("the cue never moved the arms")
	}
	if _, err := h.client.Stop(h.ctx(), &pb.StopRequest{CellName: h.cell.Name, Reason: "test"}); err != nil {
		t.Fatal(err)
	}
	// Rest must come within the braking time of the fastest joint,
	// v/a_max (+ a tick of rounding), here well under a second.
	var bound float64
	for j, l := range h.cell.JointLimits() {
		v := (c.lc.prev[j] - c.lc.prv2[j]) / c.lc.dt
		bound = max(bound, abs(v)/l.MaxAccel)
	}
	limit := int(bound/h.cell.TickS) + 3
	atRest := -1
	for i := 0; i < limit+20; i++ {
		cmd := c.step()
		if cmd.State != pb.SessionState_SESSION_STATE_HOLD {
			t.Fatalf("tick %d after Stop: state %v", i, cmd.State)
		}
		if c.lc.speed() == 0 {
			atRest = i
			break
		}
	}
	if atRest < 0 || atRest > limit {
		t.Fatalf("at rest after %d ticks, want within %d (braking time %.3f s)", atRest, limit, bound)
	}
	// And it stays at rest.
	for i := 0; i < 5; i++ {
		c.step()
		if c.lc.speed() != 0 {
			t.Fatal("moved again in hold")
		}
	}
	c.close()
}

func abs(x float64) float64 {
	if x < 0 {
		return -x
	}
	return x
}

func TestSlowReaderIsEndedNotWaitedFor(t *testing.T) {
	cfg := testConfig(t)
	cfg.SendQueueTicks = 2
	h := startBufconn(t, cfg)
	// The smallest flow-control windows gRPC allows (64 KiB, which also
	// turns off window growth), so the transport absorbs only about a
	// hundred commands before the daemon's queue fills. The cell stays
	// idle, so each tick is cheap.
	conn := h.dial(grpc.WithInitialWindowSize(1<<16), grpc.WithInitialConnWindowSize(1<<16))
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	stream, err := pb.NewCellControlClient(conn).Drive(ctx)
	if err != nil {
		t.Fatal(err)
	}
	p := newPlant(t, h.cell)
	p.hideMarkers = true
	// Send observations without reading a command. The daemon must end
	// the stream (ResourceExhausted) rather than block its tick path. The
	// sends run in their own goroutine: once the daemon stops reading,
	// flow control may block a Send until the stream is cancelled.
	sendDone := make(chan struct{})
	go func() {
		defer close(sendDone)
		for i := 0; i < 20000; i++ {
			if stream.Send(p.observation()) != nil {
				return
			}
			p.t += h.cell.TickS
			p.seq++
		}
	}()
	deadline := time.Now().Add(20 * time.Second)
	for st := h.status(); st.Ticks == 0 || st.ControllerConnected; st = h.status() {
		if time.Now().After(deadline) {
			t.Fatalf("the slow reader's stream was not ended: %v", st)
		}
		time.Sleep(5 * time.Millisecond)
	}
	// Now read: the commands sent before the end, then the status.
	for {
		if _, err = stream.Recv(); err != nil {
			break
		}
	}
	if status.Code(err) != codes.ResourceExhausted {
		t.Fatalf("slow reader: %v, want ResourceExhausted", err)
	}
	cancel()
	<-sendDone
}

func TestReconnectInStandbyStaysInStandby(t *testing.T) {
	h := startBufconn(t, testConfig(t))
	h.loadAndArm()
	c := h.connect(newPlant(t, h.cell))
	for i := 0; i < 3; i++ {
		c.step()
	}
	p := c.p
	c.close() // a clean close in standby
	deadline := time.Now().Add(5 * time.Second)
	for h.status().ControllerConnected {
		if time.Now().After(deadline) {
			t.Fatal("the daemon did not notice the closed stream")
		}
		time.Sleep(5 * time.Millisecond)
	}
	if st := h.status(); st.State != pb.SessionState_SESSION_STATE_STANDBY {
		t.Fatalf("after the controller left in standby: %v", st.State)
	}
	p.seq = 0
	c2 := h.connect(p)
	for i := 0; i < 3; i++ {
		if cmd := c2.step(); cmd.State != pb.SessionState_SESSION_STATE_STANDBY || cmd.Error != nil {
			t.Fatalf("tick %d after reconnecting: %v", i, cmd)
		}
	}
	// The session goes on: Start works from here.
	if _, err := h.client.Start(h.ctx(), &pb.StartRequest{CellName: h.cell.Name}); err != nil {
		t.Fatal(err)
	}
	if cmd := c2.step(); cmd.State != pb.SessionState_SESSION_STATE_LIVE {
		t.Fatalf("after Start: %v", cmd.State)
	}
	c2.close()
}
