package server

import (
	"context"
	"net"
	"net/http/httptest"
	"sort"
	"strconv"
	"strings"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials/insecure"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	reflectionpb "google.golang.org/grpc/reflection/grpc_reflection_v1"
	"google.golang.org/grpc/status"

	pb "tautline/proto/tautline/v1"
)

// startTCP serves cfg on a real loopback TCP port.
func startTCP(t testing.TB, cfg Config) *harness {
	t.Helper()
	srv, err := New(cfg, testLogger(t))
	if err != nil {
		t.Fatal(err)
	}
	lis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	h := &harness{t: t, srv: srv, done: make(chan error, 1)}
	go func() { h.done <- srv.Serve(lis) }()
	conn, err := grpc.NewClient(lis.Addr().String(), grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	h.finish(conn)
	return h
}

func TestLoopbackTCPHealthReflectionAndADrive(t *testing.T) {
	h := startTCP(t, testConfig(t))
	ctx := h.ctx()

	hc := healthpb.NewHealthClient(h.conn)
	for _, svc := range []string{"", ServiceName} {
		resp, err := hc.Check(ctx, &healthpb.HealthCheckRequest{Service: svc})
		if err != nil || resp.Status != healthpb.HealthCheckResponse_SERVING {
			t.Fatalf("health of %q: %v %v", svc, resp, err)
		}
	}

	rc, err := reflectionpb.NewServerReflectionClient(h.conn).ServerReflectionInfo(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if err := rc.Send(&reflectionpb.ServerReflectionRequest{MessageRequest: &reflectionpb.ServerReflectionRequest_ListServices{}}); err != nil {
		t.Fatal(err)
	}
	resp, err := rc.Recv()
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, s := range resp.GetListServicesResponse().GetService() {
		names = append(names, s.Name)
	}
	sort.Strings(names)
	got := strings.Join(names, " ")
	for _, want := range []string{ServiceName, "grpc.health.v1.Health", "grpc.reflection.v1.ServerReflection"} {
		if !strings.Contains(got, want) {
			t.Fatalf("reflection lists %q, missing %s", got, want)
		}
	}
	rc.CloseSend()

	c := goLive(t, h)
	cmd := c.runUntil(pb.SessionState_SESSION_STATE_LIVE, 5)
	for i := 0; i < 20; i++ {
		if cmd = c.step(); cmd.Error != nil || cmd.State != pb.SessionState_SESSION_STATE_LIVE {
			t.Fatalf("live over TCP: %v", cmd)
		}
	}
	c.close()
}

func TestOperatorCallsRefuseWhatTheStateDoesNotAllow(t *testing.T) {
	h := startBufconn(t, testConfig(t))
	ctx := h.ctx()
	name := h.cell.Name
	code := func(err error) codes.Code { return status.Code(err) }

	if _, err := h.client.Start(ctx, &pb.StartRequest{CellName: name}); code(err) != codes.FailedPrecondition {
		t.Fatalf("Start in idle: %v", err)
	}
	if _, err := h.client.ArmCue(ctx, &pb.ArmCueRequest{CellName: name, CueName: "nothing"}); code(err) != codes.NotFound {
		t.Fatalf("ArmCue of an unknown cue: %v", err)
	}
	if _, err := h.client.GetStatus(ctx, &pb.GetStatusRequest{CellName: "nope"}); code(err) != codes.NotFound {
		t.Fatalf("GetStatus of an unknown cell: %v", err)
	}
	if _, err := h.client.LoadCue(ctx, &pb.LoadCueRequest{CellName: name, CueName: "bad", CueCsv: []byte("time_s,left.j1\n0,0\n")}); code(err) != codes.InvalidArgument ||
		!strings.Contains(err.Error(), "bad.csv") {
		t.Fatalf("LoadCue of a bad cue: %v (want InvalidArgument naming the file)", err)
	}
	if _, err := h.client.ResetFault(ctx, &pb.ResetFaultRequest{CellName: name}); code(err) != codes.FailedPrecondition {
		t.Fatalf("ResetFault outside fault: %v", err)
	}
	h.loadAndArm()
	// Start before any observation: the arms' position is unknown.
	if _, err := h.client.Start(ctx, &pb.StartRequest{CellName: name}); code(err) != codes.FailedPrecondition {
		t.Fatalf("Start with no controller ever connected: %v", err)
	}
	list, err := h.client.ListCues(ctx, &pb.ListCuesRequest{CellName: name})
	if err != nil || len(list.Cues) != 1 || list.Cues[0].CueName != "demo" || list.Cues[0].JointCount != 12 {
		t.Fatalf("ListCues: %v %v", list, err)
	}
	// Replacing the armed cue is refused.
	if _, err := h.client.LoadCue(ctx, &pb.LoadCueRequest{CellName: name, CueName: "demo", CueCsv: readFile(t, demoCuePath)}); code(err) != codes.FailedPrecondition {
		t.Fatalf("replacing the armed cue: %v", err)
	}
	c := goLiveArmed(t, h)
	c.runUntil(pb.SessionState_SESSION_STATE_LIVE, 3)
	if _, err := h.client.ArmCue(ctx, &pb.ArmCueRequest{CellName: name, CueName: "demo"}); code(err) != codes.FailedPrecondition {
		t.Fatalf("ArmCue while live: %v", err)
	}
	st, err := h.client.Stop(ctx, &pb.StopRequest{CellName: name, Reason: "test"})
	if err != nil || st.State != pb.SessionState_SESSION_STATE_HOLD || !strings.Contains(st.StateReason, "test") {
		t.Fatalf("Stop: %v %v", st, err)
	}
	c.close()
}

// goLiveArmed is goLive for a cue already armed.
func goLiveArmed(t *testing.T, h *harness) *controller {
	t.Helper()
	c := h.connect(newPlant(t, h.cell))
	for i := 0; i < 3; i++ {
		c.step()
	}
	if _, err := h.client.Start(h.ctx(), &pb.StartRequest{CellName: h.cell.Name}); err != nil {
		t.Fatal(err)
	}
	return c
}

func TestWatchStatusSeesStateChanges(t *testing.T) {
	h := startBufconn(t, testConfig(t))
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	w, err := h.client.WatchStatus(ctx, &pb.WatchStatusRequest{CellName: h.cell.Name, MinIntervalS: 0.01})
	if err != nil {
		t.Fatal(err)
	}
	first, err := w.Recv()
	if err != nil || first.State != pb.SessionState_SESSION_STATE_IDLE {
		t.Fatalf("first status %v %v", first, err)
	}
	h.loadAndArm()
	deadline := time.Now().Add(5 * time.Second)
	for {
		st, err := w.Recv()
		if err != nil {
			t.Fatal(err)
		}
		if st.State == pb.SessionState_SESSION_STATE_STANDBY {
			if st.CueName != "demo" || st.SessionId == "" || st.CapturePath == "" {
				t.Fatalf("standby status %v", st)
			}
			break
		}
		if time.Now().After(deadline) {
			t.Fatal("no standby status")
		}
	}
	cancel()
}

func TestShutdownEndsStreamsAndClosesTheCapture(t *testing.T) {
	cfg := testConfig(t)
	h := startBufconn(t, cfg)
	c := goLive(t, h)
	c.runUntil(pb.SessionState_SESSION_STATE_LIVE, 5)
	health := healthpb.NewHealthClient(h.conn)
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	if err := h.srv.Shutdown(ctx); err != nil {
		t.Fatal(err)
	}
	// The controller's stream was ended by the daemon.
	if _, err := c.stream.Recv(); status.Code(err) != codes.Unavailable {
		t.Fatalf("controller stream after shutdown: %v, want Unavailable", err)
	}
	if _, err := health.Check(context.Background(), &healthpb.HealthCheckRequest{}); err == nil {
		t.Fatal("health answered after shutdown")
	}
	files := capturesIn(t, cfg.CaptureDir)
	if len(files) != 1 {
		t.Fatalf("captures %v", files)
	}
	recs := readCapture(t, files[0])
	end := recs[len(recs)-1].GetSessionEnd()
	if end == nil || !strings.Contains(end.Reason, "shut down") {
		t.Fatalf("last record %v, want the session end", recs[len(recs)-1])
	}
}

func TestMetricsCountLiveTicks(t *testing.T) {
	h := startBufconn(t, testConfig(t))
	c := goLive(t, h)
	c.runUntil(pb.SessionState_SESSION_STATE_LIVE, 5)
	for i := 0; i < 10; i++ {
		c.step()
	}
	c.close()
	rec := httptest.NewRecorder()
	h.srv.Metrics().Handler().ServeHTTP(rec, httptest.NewRequest("GET", MetricsPath, nil))
	body := rec.Body.String()
	var live float64 = -1
	for _, line := range strings.Split(body, "\n") {
		if strings.HasPrefix(line, MetricTicks+"{") && strings.Contains(line, `state="live"`) && strings.Contains(line, h.cell.Name) {
			f := strings.Fields(line)
			live, _ = strconv.ParseFloat(f[len(f)-1], 64)
		}
	}
	// 11 live ticks were answered after Start: the first one and ten more.
	if live != 11 {
		t.Fatalf("live tick counter %v, want 11; exposition:\n%s", live, body)
	}
}
