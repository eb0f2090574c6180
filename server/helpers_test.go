package server

import (
	"context"
	"math"
	"net"
	"os"
	"path/filepath"
	"testing"
	"time"

	"go.uber.org/zap"
	"go.uber.org/zap/zaptest"
	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/grpc/test/bufconn"

	"tautline/proto/capture"
	pb "tautline/proto/tautline/v1"
	"tautline/sim"
)

const (
	demoCellPath = "../testdata/demo/cell.json"
	demoCuePath  = "../testdata/demo/cue.csv"
)

func readFile(t testing.TB, path string) []byte {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// testConfig is the default config serving the demo cell, capturing into a
// temporary directory.
func testConfig(t testing.TB) Config {
	cfg := DefaultConfig()
	cfg.Cells = []string{demoCellPath}
	cfg.CaptureDir = t.TempDir()
	cfg.CaptureFlushIntervalS = 0.05
	// Generous: a loaded 2-core machine under -race can pause a test's
	// goroutines for a good part of a second. The stall tests set their
	// own.
	cfg.StallTimeoutS = 10
	return cfg
}

// harness is a server on an in-memory listener and a client connected to
// it.
type harness struct {
	t      testing.TB
	srv    *Server
	conn   *grpc.ClientConn
	client pb.CellControlClient
	cell   *sim.Cell
	done   chan error
	lis    *bufconn.Listener // nil over TCP
}

// dial opens another client connection to a bufconn harness.
func (h *harness) dial(opts ...grpc.DialOption) *grpc.ClientConn {
	h.t.Helper()
	opts = append(opts,
		grpc.WithContextDialer(func(ctx context.Context, _ string) (net.Conn, error) { return h.lis.DialContext(ctx) }),
		grpc.WithTransportCredentials(insecure.NewCredentials()))
	conn, err := grpc.NewClient("passthrough:///bufconn", opts...)
	if err != nil {
		h.t.Fatal(err)
	}
	h.t.Cleanup(func() { conn.Close() })
	return conn
}

func testLogger(t testing.TB) *zap.Logger {
	if testing.Verbose() {
		return zaptest.NewLogger(t)
	}
	return zap.NewNop()
}

// startBufconn starts a server with cfg over bufconn; Cleanup shuts it
// down and checks Serve's result.
func startBufconn(t testing.TB, cfg Config) *harness {
	t.Helper()
	srv, err := New(cfg, testLogger(t))
	if err != nil {
		t.Fatal(err)
	}
	lis := bufconn.Listen(1 << 20)
	h := &harness{t: t, srv: srv, done: make(chan error, 1), lis: lis}
	go func() { h.done <- srv.Serve(lis) }()
	conn, err := grpc.NewClient("passthrough:///bufconn",
		grpc.WithContextDialer(func(ctx context.Context, _ string) (net.Conn, error) { return lis.DialContext(ctx) }),
		grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	h.finish(conn)
	return h
}

func (h *harness) finish(conn *grpc.ClientConn) {
	t := h.t
	h.conn = conn
	h.client = pb.NewCellControlClient(conn)
	cell, err := sim.LoadCell(demoCellPath, os.ReadFile)
	if err != nil {
		t.Fatal(err)
	}
	h.cell = cell
	t.Cleanup(func() {
		conn.Close()
		ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
		defer cancel()
		if err := h.srv.Shutdown(ctx); err != nil {
			t.Errorf("Shutdown: %v", err)
		}
		if err := <-h.done; err != nil {
			t.Errorf("Serve: %v", err)
		}
	})
}

func (h *harness) ctx() context.Context {
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	h.t.Cleanup(cancel)
	return ctx
}

// loadAndArm loads the demo cue as "demo" and arms it.
func (h *harness) loadAndArm() {
	h.t.Helper()
	ctx := h.ctx()
	if _, err := h.client.LoadCue(ctx, &pb.LoadCueRequest{CellName: h.cell.Name, CueName: "demo", CueCsv: readFile(h.t, demoCuePath), CueFileName: "cue.csv"}); err != nil {
		h.t.Fatal(err)
	}
	st, err := h.client.ArmCue(ctx, &pb.ArmCueRequest{CellName: h.cell.Name, CueName: "demo"})
	if err != nil {
		h.t.Fatal(err)
	}
	if st.State != pb.SessionState_SESSION_STATE_STANDBY {
		h.t.Fatalf("after ArmCue the state is %v, want standby", st.State)
	}
}

func (h *harness) status() *pb.CellStatus {
	h.t.Helper()
	st, err := h.client.GetStatus(h.ctx(), &pb.GetStatusRequest{CellName: h.cell.Name})
	if err != nil {
		h.t.Fatal(err)
	}
	return st
}

// plant is a simulated cell for the tests: the arms follow every command
// exactly, the figure is stepped on the cell's own model, and the markers
// are read off its nodes (the demo tracker frame is the world frame).
type plant struct {
	cell         *sim.Cell
	cws          *sim.CellWorkspace
	x, xPrev, xN []float64
	q            []float64
	t            float64
	seq          uint64
	latencyS     float64
	hideMarkers  bool
}

func newPlant(t testing.TB, cell *sim.Cell) *plant {
	t.Helper()
	model, err := cell.NewModel(cell.TickS)
	if err != nil {
		t.Fatal(err)
	}
	p := &plant{cell: cell, cws: cell.NewWorkspace(model), q: make([]float64, cell.NumJoints())}
	d := model.Dim()
	p.x, p.xPrev, p.xN = make([]float64, d), make([]float64, d), make([]float64, d)
	cell.HomeTo(p.q)
	anchors := make([]float64, 3*cell.NumAnchors())
	p.cws.AnchorsTo(anchors, p.q)
	if err := model.RestPose(p.cws.StepWorkspace(), p.x, anchors); err != nil {
		t.Fatal(err)
	}
	copy(p.xPrev, p.x)
	p.t = 10 // the controller's clock does not start at the cue's
	p.latencyS = 0.02
	return p
}

// observation is what the plant reports now.
func (p *plant) observation() *pb.Observation {
	obs := &pb.Observation{
		CellName:               p.cell.Name,
		TickSeq:                p.seq,
		CueTimeS:               p.t,
		CaptureTimeS:           p.t - p.latencyS,
		MeasuredJointPositions: append([]float64(nil), p.q...),
	}
	if !p.hideMarkers {
		for _, m := range p.cell.Markers {
			n := 3 * m.Node
			obs.Markers = append(obs.Markers, &pb.MarkerSighting{MarkerId: m.ID, XM: p.x[n], YM: p.x[n+1], ZM: p.x[n+2]})
		}
	}
	return obs
}

// apply moves the arms to the command's next targets and steps the figure
// one tick.
func (p *plant) apply(t testing.TB, cmd *pb.Command) {
	t.Helper()
	copy(p.q, cmd.GetNext().GetPositions())
	if err := p.cws.Step(p.xN, p.x, p.xPrev, p.q); err != nil {
		t.Fatal(err)
	}
	p.xPrev, p.x, p.xN = p.x, p.xN, p.xPrev
	p.t += p.cell.TickS
	p.seq++
}

// limitChecker checks a stream of commanded targets against the cell's
// joint limits with its own finite differences, independently of the
// guard's code: position within [lower, upper], |Δq|/Δt ≤ v_max and
// |Δ²q|/Δt² ≤ a_max. The slack is relative, 1e-9 of the limit (plus an
// absolute 1e-9 for positions): far above float rounding of a difference
// of two positions near 1 rad divided by Δt² = 1e-4 s² (about 1e-12), far
// below any real violation.
type limitChecker struct {
	lim        []sim.JointLimit
	dt         float64
	prev, prv2 []float64
	n          int
	worst      float64 // largest ratio of |a| to a_max seen
}

func newLimitChecker(cell *sim.Cell) *limitChecker {
	return &limitChecker{lim: cell.JointLimits(), dt: cell.TickS}
}

func (c *limitChecker) check(t testing.TB, where string, q []float64) {
	t.Helper()
	if len(q) != len(c.lim) {
		t.Fatalf("%s: %d targets, want %d", where, len(q), len(c.lim))
	}
	for j, l := range c.lim {
		v := q[j]
		if math.IsNaN(v) || v < l.Lower-1e-9 || v > l.Upper+1e-9 {
			t.Fatalf("%s: joint %s target %v outside [%v, %v]", where, l.Name, v, l.Lower, l.Upper)
		}
		if c.n >= 1 {
			vel := (v - c.prev[j]) / c.dt
			if math.Abs(vel) > l.MaxVelocity*(1+1e-9) {
				t.Fatalf("%s: joint %s velocity %v beyond %v", where, l.Name, vel, l.MaxVelocity)
			}
		}
		if c.n >= 2 {
			acc := (v - 2*c.prev[j] + c.prv2[j]) / (c.dt * c.dt)
			if math.Abs(acc) > l.MaxAccel*(1+1e-6)+1e-6 {
				t.Fatalf("%s: joint %s acceleration %v beyond %v", where, l.Name, acc, l.MaxAccel)
			}
			c.worst = math.Max(c.worst, math.Abs(acc)/l.MaxAccel)
		}
	}
	c.prv2 = append(c.prv2[:0], c.prev...)
	c.prev = append(c.prev[:0], q...)
	c.n++
}

// speed is the largest joint speed of the last step checked, per s.
func (c *limitChecker) speed() float64 {
	m := 0.0
	for j := range c.prev {
		m = math.Max(m, math.Abs(c.prev[j]-c.prv2[j])/c.dt)
	}
	return m
}

func capturesIn(t testing.TB, dir string) []string {
	t.Helper()
	m, err := filepath.Glob(filepath.Join(dir, "*.tlcap"))
	if err != nil {
		t.Fatal(err)
	}
	return m
}

func readCapture(t testing.TB, path string) []*pb.Record {
	t.Helper()
	recs, dmg, err := capture.ReadFile(path)
	if err != nil || dmg != nil {
		t.Fatalf("reading %s: %v, damage %v", path, err, dmg)
	}
	return recs
}
