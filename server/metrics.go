package server

import (
	"math"
	"strings"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"

	"tautline/mpc"
	pb "tautline/proto/tautline/v1"
)

// Metric names. Every name carries its unit (seconds, meters, bytes) or
// ends in _total for a count, as Prometheus naming conventions ask.
const (
	MetricTickDuration        = "tautline_tick_duration_seconds"
	MetricTicks               = "tautline_ticks_total"
	MetricFallbacks           = "tautline_fallbacks_total"
	MetricBoundActions        = "tautline_bound_actions_total"
	MetricTrackingError       = "tautline_tracking_error_meters"
	MetricRejectedObservation = "tautline_observations_rejected_total"
	MetricRejectedMarkers     = "tautline_markers_rejected_total"
	MetricCaptureBytes        = "tautline_capture_written_bytes_total"
	MetricCaptureFlush        = "tautline_capture_flush_duration_seconds"
	MetricControllerConnected = "tautline_controller_connected"
	MetricAuthzDenials        = "tautline_authz_denials_total"
)

// Tick phases, the values of the phase label of MetricTickDuration.
const (
	PhasePrepare  = "prepare"  // the planner's prepare phase (linearisation), run after the command went out
	PhaseFeedback = "feedback" // observation in → command ready: estimator update, planner feedback, guard
	PhaseTick     = "tick"     // the whole tick: prepare + feedback
)

// FallbackReason says why a live tick did not use a fresh planner
// correction (the command fell back on the nominal with the correction
// held or fading).
type FallbackReason int

const (
	FallbackPlannerError  FallbackReason = iota // the planner returned an error or ran out of budget
	FallbackEstimator                           // the estimator failed or is not initialised
	FallbackStaleFeedback                       // no marker accepted for too long
	FallbackRejectedInput                       // the observation was rejected (see MetricRejectedObservation)
	numFallbackReasons
)

var fallbackReasonNames = [numFallbackReasons]string{"planner_error", "estimator", "stale_feedback", "rejected_input"}

// String is the reason's label value.
func (r FallbackReason) String() string {
	if r < 0 || r >= numFallbackReasons {
		return "unknown"
	}
	return fallbackReasonNames[r]
}

// Histogram buckets. Tick durations straddle the design's figures (feedback
// p99 ≤ 1 ms, whole tick ≤ 4 ms: DESIGN §8), so both are bucket edges.
var (
	tickBucketsS          = []float64{50e-6, 100e-6, 250e-6, 500e-6, 1e-3, 2e-3, 4e-3, 8e-3, 16e-3, 50e-3}
	trackingErrorBucketsM = []float64{0.5e-3, 1e-3, 2e-3, 5e-3, 10e-3, 20e-3, 50e-3, 0.1, 0.2}
	flushBucketsS         = []float64{100e-6, 500e-6, 1e-3, 5e-3, 10e-3, 50e-3, 0.1, 0.5, 1}
)

// Metrics holds tautlined's Prometheus metrics in their own registry (with
// the Go runtime and process collectors). Make one with NewMetrics, get a
// CellMetrics per served cell with Cell, serve Registry over HTTP with
// MetricsHandler.
//
// A nil *Metrics and a nil *CellMetrics are valid and record nothing, so
// the daemon and its tests can run without metrics.
type Metrics struct {
	Registry *prometheus.Registry

	tickDuration  *prometheus.HistogramVec
	ticks         *prometheus.CounterVec
	fallbacks     *prometheus.CounterVec
	bounds        *prometheus.CounterVec
	trackingError *prometheus.HistogramVec
	rejected      *prometheus.CounterVec
	markers       *prometheus.CounterVec
	captureBytes  *prometheus.CounterVec
	captureFlush  *prometheus.HistogramVec
	connected     *prometheus.GaugeVec
	authzDenials  *prometheus.CounterVec
}

// NewMetrics creates and registers every metric.
func NewMetrics() *Metrics {
	m := &Metrics{Registry: prometheus.NewRegistry()}
	m.tickDuration = prometheus.NewHistogramVec(prometheus.HistogramOpts{
		Name:    MetricTickDuration,
		Help:    "Compute time of one tick by phase (prepare, feedback, tick = both), s.",
		Buckets: tickBucketsS,
	}, []string{"cell", "phase"})
	m.ticks = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: MetricTicks,
		Help: "Ticks answered, by the session state the command carried.",
	}, []string{"cell", "state"})
	m.fallbacks = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: MetricFallbacks,
		Help: "Live ticks answered without a fresh planner correction, by reason.",
	}, []string{"cell", "reason"})
	m.bounds = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: MetricBoundActions,
		Help: "Times the guard changed a joint's target, by joint and bound kind.",
	}, []string{"cell", "joint", "kind"})
	m.trackingError = prometheus.NewHistogramVec(prometheus.HistogramOpts{
		Name:    MetricTrackingError,
		Help:    "RMS distance of the observed markers (gate-rejected ones left out) from the cue's reference at their capture time, per tracker frame taken on live and coast ticks, m.",
		Buckets: trackingErrorBucketsM,
	}, []string{"cell"})
	m.rejected = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: MetricRejectedObservation,
		Help: "Observations answered with a tick error, by reason (the TickErrorCode).",
	}, []string{"cell", "reason"})
	m.markers = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: MetricRejectedMarkers,
		Help: "Marker sightings the estimator's innovation gate threw out.",
	}, []string{"cell"})
	m.captureBytes = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: MetricCaptureBytes,
		Help: "Bytes written to session captures.",
	}, []string{"cell"})
	m.captureFlush = prometheus.NewHistogramVec(prometheus.HistogramOpts{
		Name:    MetricCaptureFlush,
		Help:    "Time to flush and sync a capture file, s.",
		Buckets: flushBucketsS,
	}, []string{"cell"})
	m.connected = prometheus.NewGaugeVec(prometheus.GaugeOpts{
		Name: MetricControllerConnected,
		Help: "1 while a controller stream is open for the cell, else 0.",
	}, []string{"cell"})
	m.authzDenials = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: MetricAuthzDenials,
		Help: "Calls refused by authorisation, by gRPC status code.",
	}, []string{"code"})
	m.Registry.MustRegister(
		m.tickDuration, m.ticks, m.fallbacks, m.bounds, m.trackingError, m.rejected,
		m.markers, m.captureBytes, m.captureFlush, m.connected, m.authzDenials,
		collectors.NewGoCollector(),
		collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}),
	)
	for _, code := range []string{"PermissionDenied", "Unauthenticated"} {
		m.authzDenials.WithLabelValues(code)
	}
	return m
}

// CellMetrics records one cell's metrics. Every label child is created
// by Metrics.Cell, so recording allocates nothing. Its methods are safe
// for concurrent use.
type CellMetrics struct {
	prepare, feedback, tick prometheus.Observer
	ticks                   []prometheus.Counter // by pb.SessionState
	fallbacks               [numFallbackReasons]prometheus.Counter
	bounds                  [][]prometheus.Counter // [joint][pb.BoundKind]
	trackingError           prometheus.Observer
	rejected                []prometheus.Counter // by pb.TickErrorCode
	markers                 prometheus.Counter
	captureBytes            prometheus.Counter
	captureFlush            prometheus.Observer
	connected               prometheus.Gauge

	markerNodes []int     // node of each of the cell's markers, in cell order
	refBuf      []float64 // the reference's marker positions, xyz per marker
}

// enumLabel turns an enum value name into a label value: the prefix goes,
// the rest is lower case ("SESSION_STATE_LIVE" → "live").
func enumLabel(name, prefix string) string {
	return strings.ToLower(strings.TrimPrefix(name, prefix))
}

// Cell creates the label children of the cell named cell, whose joints are
// jointNames in command order and whose markers sit on the figure nodes
// markerNodes (in the cell's marker order, as references give them), and
// returns their recorder. Call it once per cell when the cell is loaded.
// Counters start at zero, so a rate is defined from the first scrape.
func (m *Metrics) Cell(cell string, jointNames []string, markerNodes []int) *CellMetrics {
	if m == nil {
		return nil
	}
	c := &CellMetrics{
		prepare:       m.tickDuration.WithLabelValues(cell, PhasePrepare),
		feedback:      m.tickDuration.WithLabelValues(cell, PhaseFeedback),
		tick:          m.tickDuration.WithLabelValues(cell, PhaseTick),
		trackingError: m.trackingError.WithLabelValues(cell),
		markers:       m.markers.WithLabelValues(cell),
		captureBytes:  m.captureBytes.WithLabelValues(cell),
		captureFlush:  m.captureFlush.WithLabelValues(cell),
		connected:     m.connected.WithLabelValues(cell),
		markerNodes:   append([]int(nil), markerNodes...),
		refBuf:        make([]float64, 3*len(markerNodes)),
	}
	c.ticks = make([]prometheus.Counter, len(pb.SessionState_name))
	for v, name := range pb.SessionState_name {
		if v != 0 {
			c.ticks[v] = m.ticks.WithLabelValues(cell, enumLabel(name, "SESSION_STATE_"))
		}
	}
	for r := range c.fallbacks {
		c.fallbacks[r] = m.fallbacks.WithLabelValues(cell, FallbackReason(r).String())
	}
	c.bounds = make([][]prometheus.Counter, len(jointNames))
	for j, joint := range jointNames {
		c.bounds[j] = make([]prometheus.Counter, len(pb.BoundKind_name))
		for v, name := range pb.BoundKind_name {
			if v != 0 {
				c.bounds[j][v] = m.bounds.WithLabelValues(cell, joint, enumLabel(name, "BOUND_KIND_"))
			}
		}
	}
	c.rejected = make([]prometheus.Counter, len(pb.TickErrorCode_name))
	for v, name := range pb.TickErrorCode_name {
		if v != 0 && pb.TickErrorCode(v) != pb.TickErrorCode_TICK_ERROR_CODE_PLANNER {
			c.rejected[v] = m.rejected.WithLabelValues(cell, enumLabel(name, "TICK_ERROR_CODE_"))
		}
	}
	return c
}

// ObserveTick records one answered tick: the state its command carried and
// its phase durations in seconds. prepareS < 0 means the tick ran no
// prepare phase (only feedback and tick are recorded).
func (c *CellMetrics) ObserveTick(state pb.SessionState, prepareS, feedbackS float64) {
	if c == nil {
		return
	}
	if i := int(state); i > 0 && i < len(c.ticks) {
		c.ticks[i].Inc()
	}
	tick := feedbackS
	if prepareS >= 0 {
		c.prepare.Observe(prepareS)
		tick += prepareS
	}
	c.feedback.Observe(feedbackS)
	c.tick.Observe(tick)
}

// Fallback counts a live tick that fell back, for reason r.
func (c *CellMetrics) Fallback(r FallbackReason) {
	if c == nil || r < 0 || r >= numFallbackReasons {
		return
	}
	c.fallbacks[r].Inc()
}

// BoundActed counts the guard acting on joint j (command order) with a
// bound of kind k. Out-of-range arguments are ignored.
func (c *CellMetrics) BoundActed(j int, k pb.BoundKind) {
	if c == nil || j < 0 || j >= len(c.bounds) || k <= 0 || int(k) >= len(c.bounds[j]) {
		return
	}
	c.bounds[j][k].Inc()
}

// TrackingError records a live tick's tracking error, m.
func (c *CellMetrics) TrackingError(m float64) {
	if c == nil {
		return
	}
	c.trackingError.Observe(m)
}

// TrackingErrorFrom records the tracking error of the estimated figure
// state x (node positions first, xyz per node) against the reference's
// marker positions at cue time cueS: TrackingErrorM over the cell's
// markers. It reuses one buffer, so call it from the cell's tick only (one
// goroutine at a time); it allocates nothing.
func (c *CellMetrics) TrackingErrorFrom(ref mpc.MarkerReference, cueS float64, x []float64) {
	if c == nil || ref == nil || len(c.markerNodes) == 0 {
		return
	}
	ref.MarkersTo(c.refBuf, cueS)
	c.trackingError.Observe(TrackingErrorM(x, c.markerNodes, c.refBuf))
}

// TrackingErrorM is the root mean square, over markers i, of the distance
// between node nodes[i] of x (xyz per node) and ref[3i:3i+3], m. NaN when
// there are no markers.
func TrackingErrorM(x []float64, nodes []int, ref []float64) float64 {
	if len(ref) != 3*len(nodes) {
		panic("server: TrackingErrorM: reference length is not 3 per marker")
	}
	if len(nodes) == 0 {
		return math.NaN()
	}
	var sum float64
	for i, n := range nodes {
		for k := 0; k < 3; k++ {
			d := x[3*n+k] - ref[3*i+k]
			sum += d * d
		}
	}
	return math.Sqrt(sum / float64(len(nodes)))
}

// RejectedObservation counts an observation answered with tick error
// code. TICK_ERROR_CODE_PLANNER is not a rejected observation (count it
// with Fallback) and is ignored here, as are unknown codes.
func (c *CellMetrics) RejectedObservation(code pb.TickErrorCode) {
	if c == nil || code <= 0 || int(code) >= len(c.rejected) || c.rejected[code] == nil {
		return
	}
	c.rejected[code].Inc()
}

// RejectedMarkers counts n marker sightings thrown out by the estimator's
// gate.
func (c *CellMetrics) RejectedMarkers(n int) {
	if c == nil || n <= 0 {
		return
	}
	c.markers.Add(float64(n))
}

// CaptureWritten counts n bytes written to the cell's capture.
func (c *CellMetrics) CaptureWritten(n int) {
	if c == nil || n <= 0 {
		return
	}
	c.captureBytes.Add(float64(n))
}

// CaptureFlushed records one capture flush that took s seconds.
func (c *CellMetrics) CaptureFlushed(s float64) {
	if c == nil {
		return
	}
	c.captureFlush.Observe(s)
}

// ControllerConnected sets whether a controller stream is open.
func (c *CellMetrics) ControllerConnected(open bool) {
	if c == nil {
		return
	}
	if open {
		c.connected.Set(1)
	} else {
		c.connected.Set(0)
	}
}

// AuthzDenied counts a call refused by authorisation with gRPC status
// code name code ("PermissionDenied" or "Unauthenticated").
func (m *Metrics) AuthzDenied(code string) {
	if m == nil {
		return
	}
	m.authzDenials.WithLabelValues(code).Inc()
}
