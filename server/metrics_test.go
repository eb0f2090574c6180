package server

import (
	"io"
	"math"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"

	"github.com/prometheus/client_golang/prometheus/testutil"

	pb "tautline/proto/tautline/v1"
)

var (
	testJoints      = []string{"left.shoulder", "left.elbow"}
	testMarkerNodes = []int{2, 0}
)

// fixedReference gives the same marker positions at every time.
type fixedReference struct{ xyz []float64 }

func (r *fixedReference) MarkersTo(dst []float64, _ float64) { copy(dst, r.xyz) }

func TestTrackingError(t *testing.T) {
	// Three nodes; markers on nodes 2 and 0. Distances 3-4-5 (a Pythagorean
	// triple) and 0: RMS = sqrt((25 + 0)/2).
	x := []float64{
		1, 1, 1, // node 0
		9, 9, 9, // node 1: no marker, must not count
		0, 0, 0, // node 2
	}
	ref := &fixedReference{[]float64{3, 4, 0, 1, 1, 1}}
	want := math.Sqrt(25.0 / 2)
	if got := TrackingErrorM(x, testMarkerNodes, ref.xyz); math.Abs(got-want) > 1e-15 {
		t.Errorf("TrackingErrorM = %v, want %v", got, want)
	}
	m := NewMetrics()
	c := m.Cell("demo", testJoints, testMarkerNodes)
	c.TrackingErrorFrom(ref, 0, x)
	checkHistogram(t, m, MetricTrackingError, map[string]string{"cell": "demo"}, []float64{want})
	if allocs := testing.AllocsPerRun(100, func() { c.TrackingErrorFrom(ref, 0, x) }); allocs != 0 {
		t.Errorf("TrackingErrorFrom: %v allocations, want 0", allocs)
	}
}

// Every metric name passes client_golang's own linter (testutil.GatherAndLint
// applies the Prometheus naming conventions: units as base units in the
// name, counters ending in _total).
func TestMetricsNamesPassPrometheusLint(t *testing.T) {
	m := NewMetrics()
	c := m.Cell("demo", testJoints, testMarkerNodes)
	c.ObserveTick(pb.SessionState_SESSION_STATE_LIVE, 0.002, 0.0005)
	c.TrackingError(0.003)
	problems, err := testutil.GatherAndLint(m.Registry)
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range problems {
		t.Errorf("%s: %s", p.Metric, p.Text)
	}
}

func TestMetricsCountWhatTheyAreTold(t *testing.T) {
	m := NewMetrics()
	c := m.Cell("demo", testJoints, testMarkerNodes)
	other := m.Cell("other", testJoints, testMarkerNodes)

	c.ObserveTick(pb.SessionState_SESSION_STATE_LIVE, 0.002, 0.0005)
	c.ObserveTick(pb.SessionState_SESSION_STATE_LIVE, -1, 0.0007)
	c.ObserveTick(pb.SessionState_SESSION_STATE_COAST, -1, 0.0001)
	other.ObserveTick(pb.SessionState_SESSION_STATE_IDLE, -1, 0.0001)
	c.Fallback(FallbackStaleFeedback)
	c.Fallback(FallbackStaleFeedback)
	c.Fallback(FallbackPlannerError)
	c.BoundActed(1, pb.BoundKind_BOUND_KIND_VELOCITY)
	c.BoundActed(0, pb.BoundKind_BOUND_KIND_POSITION_UPPER)
	c.BoundActed(1, pb.BoundKind_BOUND_KIND_VELOCITY)
	c.BoundActed(2, pb.BoundKind_BOUND_KIND_VELOCITY) // no joint 2: ignored
	c.RejectedObservation(pb.TickErrorCode_TICK_ERROR_CODE_NOT_FINITE)
	c.RejectedObservation(pb.TickErrorCode_TICK_ERROR_CODE_PLANNER) // a fallback, not a rejection: ignored
	c.RejectedMarkers(3)
	c.CaptureWritten(1000)
	c.CaptureWritten(24)
	c.CaptureFlushed(0.002)
	c.ControllerConnected(true)
	m.AuthzDenied("PermissionDenied")

	counts := []struct {
		name string
		got  float64
		want float64
	}{
		{"live ticks", testutil.ToFloat64(m.ticks.WithLabelValues("demo", "live")), 2},
		{"coast ticks", testutil.ToFloat64(m.ticks.WithLabelValues("demo", "coast")), 1},
		{"demo idle ticks", testutil.ToFloat64(m.ticks.WithLabelValues("demo", "idle")), 0},
		{"other idle ticks", testutil.ToFloat64(m.ticks.WithLabelValues("other", "idle")), 1},
		{"stale fallbacks", testutil.ToFloat64(m.fallbacks.WithLabelValues("demo", "stale_feedback")), 2},
		{"planner fallbacks", testutil.ToFloat64(m.fallbacks.WithLabelValues("demo", "planner_error")), 1},
		{"elbow velocity", testutil.ToFloat64(m.bounds.WithLabelValues("demo", "left.elbow", "velocity")), 2},
		{"shoulder upper", testutil.ToFloat64(m.bounds.WithLabelValues("demo", "left.shoulder", "position_upper")), 1},
		{"not finite", testutil.ToFloat64(m.rejected.WithLabelValues("demo", "not_finite")), 1},
		{"markers", testutil.ToFloat64(m.markers.WithLabelValues("demo")), 3},
		{"capture bytes", testutil.ToFloat64(m.captureBytes.WithLabelValues("demo")), 1024},
		{"connected", testutil.ToFloat64(m.connected.WithLabelValues("demo")), 1},
		{"denied", testutil.ToFloat64(m.authzDenials.WithLabelValues("PermissionDenied")), 1},
	}
	for _, k := range counts {
		if k.got != k.want {
			t.Errorf("%s: %v, want %v", k.name, k.got, k.want)
		}
	}
	// No planner label was ever created for rejections.
	if n := testutil.CollectAndCount(m.rejected); n != 2*(len(pb.TickErrorCode_name)-2) {
		t.Errorf("%d rejection series, want one per input error code per cell (%d)", n, 2*(len(pb.TickErrorCode_name)-2))
	}

	// The whole tick is prepare + feedback; without prepare it is feedback.
	for _, h := range []struct {
		phase string
		obs   []float64
	}{
		{PhasePrepare, []float64{0.002}},
		{PhaseFeedback, []float64{0.0005, 0.0007, 0.0001}},
		{PhaseTick, []float64{0.0025, 0.0007, 0.0001}},
	} {
		checkHistogram(t, m, MetricTickDuration, map[string]string{"cell": "demo", "phase": h.phase}, h.obs)
	}
	checkHistogram(t, m, MetricTrackingError, map[string]string{"cell": "demo"}, nil)
	checkHistogram(t, m, MetricCaptureFlush, map[string]string{"cell": "demo"}, []float64{0.002})
}

// checkHistogram finds the series of name with exactly labels in m's
// registry and checks its count, sum and every cumulative bucket against
// obs, counted here independently.
func checkHistogram(t *testing.T, m *Metrics, name string, labels map[string]string, obs []float64) {
	t.Helper()
	families, err := m.Registry.Gather()
	if err != nil {
		t.Fatal(err)
	}
	for _, f := range families {
		if f.GetName() != name {
			continue
		}
	series:
		for _, s := range f.GetMetric() {
			if len(s.GetLabel()) != len(labels) {
				continue
			}
			for _, l := range s.GetLabel() {
				if labels[l.GetName()] != l.GetValue() {
					continue series
				}
			}
			h := s.GetHistogram()
			sum := 0.0
			for _, o := range obs {
				sum += o
			}
			if h.GetSampleCount() != uint64(len(obs)) {
				t.Errorf("%s%v: count %d, want %d", name, labels, h.GetSampleCount(), len(obs))
			}
			// Sums of a few values: only rounding separates them.
			if d := h.GetSampleSum() - sum; d > 1e-15 || d < -1e-15 {
				t.Errorf("%s%v: sum %v, want %v", name, labels, h.GetSampleSum(), sum)
			}
			for _, b := range h.GetBucket() {
				var n uint64
				for _, o := range obs {
					if o <= b.GetUpperBound() {
						n++
					}
				}
				if b.GetCumulativeCount() != n {
					t.Errorf("%s%v: bucket le=%v has %d, want %d", name, labels, b.GetUpperBound(), b.GetCumulativeCount(), n)
				}
			}
			return
		}
	}
	t.Errorf("no series %s%v", name, labels)
}

// Recording a tick allocates nothing: the label children are made by
// Metrics.Cell.
func TestCellMetricsRecordWithoutAllocating(t *testing.T) {
	c := NewMetrics().Cell("demo", testJoints, testMarkerNodes)
	allocs := testing.AllocsPerRun(100, func() {
		c.ObserveTick(pb.SessionState_SESSION_STATE_LIVE, 0.002, 0.0005)
		c.Fallback(FallbackEstimator)
		c.BoundActed(1, pb.BoundKind_BOUND_KIND_ACCELERATION)
		c.TrackingError(0.004)
		c.RejectedObservation(pb.TickErrorCode_TICK_ERROR_CODE_LATE)
		c.RejectedMarkers(1)
		c.CaptureWritten(512)
		c.CaptureFlushed(0.001)
	})
	if allocs != 0 {
		t.Errorf("%v allocations per tick, want 0", allocs)
	}
}

// A nil recorder records nothing and does not panic, so the server runs
// without metrics.
func TestNilMetricsRecordNothing(t *testing.T) {
	var m *Metrics
	c := m.Cell("demo", testJoints, testMarkerNodes)
	if c != nil {
		t.Fatal("a nil Metrics made a cell recorder")
	}
	c.ObserveTick(pb.SessionState_SESSION_STATE_LIVE, 0.001, 0.001)
	c.Fallback(FallbackPlannerError)
	c.BoundActed(0, pb.BoundKind_BOUND_KIND_VELOCITY)
	c.TrackingError(1)
	c.RejectedObservation(pb.TickErrorCode_TICK_ERROR_CODE_LATE)
	c.RejectedMarkers(1)
	c.CaptureWritten(1)
	c.CaptureFlushed(1)
	c.ControllerConnected(true)
	m.AuthzDenied("Unauthenticated")
}

// The HTTP listener serves the exposition format at MetricsPath and
// nothing elsewhere.
func TestMetricsHTTPServesExposition(t *testing.T) {
	m := NewMetrics()
	m.Cell("demo", testJoints, testMarkerNodes).ObserveTick(pb.SessionState_SESSION_STATE_STANDBY, -1, 0.0001)
	ts := httptest.NewServer(NewMetricsHTTPServer(m).Handler)
	defer ts.Close()

	resp, err := http.Get(ts.URL + MetricsPath)
	if err != nil {
		t.Fatal(err)
	}
	body, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	if resp.StatusCode != http.StatusOK {
		t.Fatalf("GET %s: %s", MetricsPath, resp.Status)
	}
	for _, want := range []string{
		`tautline_ticks_total{cell="demo",state="standby"} 1`,
		`tautline_tick_duration_seconds_bucket{cell="demo",phase="feedback",le="0.001"} 1`,
		`tautline_bound_actions_total{cell="demo",joint="left.elbow",kind="acceleration"} 0`,
		"go_goroutines ",
	} {
		if !strings.Contains(string(body), want) {
			t.Errorf("exposition lacks %q", want)
		}
	}
	resp, err = http.Get(ts.URL + "/")
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	if resp.StatusCode != http.StatusNotFound {
		t.Errorf("GET /: %s, want 404", resp.Status)
	}
}
