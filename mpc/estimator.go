package mpc

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"

	"tautline/sim"
)

// Defaults used when an EstimatorSettings field is zero.
const (
	// DefaultProcessAccelMPerS2 is the standard deviation of the unmodelled
	// acceleration of each node coordinate over one step. On the demo cell
	// with every mass off by up to ±10 %, 1 mm marker noise and 20 %
	// occlusion (no marker offsets, no push), the RMS position error over
	// all nodes is lowest between 0.2 and 0.3 m/s² (1.0 mm) and grows to
	// 1.2 mm at 0.5 and 1.5 mm at 1.0; below 0.2 the gate starts rejecting
	// good markers. But against the standard mismatch profile in closed
	// loop (demo cue, marker offsets on; see the tautline demo), 0.3 left
	// the filter too sure of itself after the push at 4 s: the gate then
	// threw out one to four good markers on nearly every tick for 3 s and
	// the estimate drifted 7–9 mm off. Closed ÷ open RMS figure error over
	// the cue: 0.394 at 0.3, 0.381 at 0.5, 0.371 at 1.0, 0.368 at 2.0
	// (the demo itself: 0.395 at 0.3, 0.372 at 1.0), with ticks that
	// reject a marker falling from about 300 to 20 at 1.0. 1.0 is the
	// default: most of the gain, for 1.5 instead of 1.3 mm of position
	// error in the first check (TestEstimatorDemoFigureNoisyOccluded).
	DefaultProcessAccelMPerS2 = 1.0
	// DefaultProcessPositionM is the per-step position random walk: the
	// step's solve tolerance is far below it; it keeps the predicted
	// covariance of every free coordinate positive definite.
	DefaultProcessPositionM = 1e-6
	// DefaultInitialShiftM is the standard deviation of a common shift of
	// the whole figure away from its rest pose at initialisation (the
	// figure hangs where the arms put it, give or take this much).
	DefaultInitialShiftM = 0.05
	// DefaultInitialLocalM is the standard deviation of each node's own
	// offset from the rest pose at initialisation.
	DefaultInitialLocalM = 0.02
	// DefaultInitialSpeedMPerS is the standard deviation of each node's
	// velocity at initialisation (the estimate starts at rest).
	DefaultInitialSpeedMPerS = 0.2
	// DefaultGateChi2 is the chi-square gate on one marker's innovation:
	// the 0.999 quantile of the chi-square distribution with 3 degrees of
	// freedom (tabulated in Abramowitz and Stegun, Handbook of Mathematical
	// Functions, table 26.8, as 16.266; the tests recompute it with gonum's
	// distuv.ChiSquared). A correct marker is rejected once in a thousand.
	DefaultGateChi2 = 16.266
	// DefaultStaleAfterTicks is the number of consecutive observations
	// without an accepted marker after which the report says the estimate
	// is stale.
	DefaultStaleAfterTicks = 5
	// DefaultCommandHistory is how many recorded commands are kept.
	DefaultCommandHistory = 32
	// DefaultMarkerOffsetWalkMPerSqrtS is the random-walk intensity of each
	// marker offset coordinate (see Estimator, Marker offsets): its
	// standard deviation grows by this much per √s. Tuned (with a process
	// acceleration of 0.3 m/s²) on the demo cell
	// and cue against the standard mismatch profile in closed loop (the
	// planner cancelling the offsets; RMS figure error closed ÷ open over
	// the 12 s cue): 0.39 at 0.1 and 0.5 mm/√s, 0.40 at 1, 0.42 at 2,
	// 0.49 at 5, 0.58 at 10 and 0.82 at 30 mm/√s; with only the strings
	// mismatched it is 0.11 anywhere from 0.5 to 2 mm/√s. A fast walk lets
	// the offsets soak up swings (the push, the extra damping) that the
	// planner then takes for static; a slow one still follows the offsets
	// as the pose changes over the cue.
	DefaultMarkerOffsetWalkMPerSqrtS = 0.0005
	// DefaultInitialMarkerOffsetM is the prior standard deviation of each
	// marker offset coordinate when the filter initialises (the prior mean
	// is zero): a few percent of the demo's 0.75 m strings. The closed-loop
	// figure above did not change between 1 and 5 cm.
	DefaultInitialMarkerOffsetM = 0.03
	// DefaultMaxPredictSteps bounds the process steps one call may take:
	// an observation further than this from the filter's time
	// re-initialises the filter, and PredictTo refuses to go further.
	// 50 steps is half a second at the demo's 10 ms tick: beyond that the
	// prediction is worth little and its cost (one covariance propagation
	// per step) would stall the tick.
	DefaultMaxPredictSteps = 50
	// MarkerNoiseFloorM is added in quadrature to the marker noise so the
	// innovation covariance stays positive definite for a noise-free
	// tracker or a marker on an anchored node (1 nm: far below any tracker).
	MarkerNoiseFloorM = 1e-9
)

// EstimatorSettings tunes an Estimator. The zero value of every field
// means the documented default; a negative value is an error.
type EstimatorSettings struct {
	ProcessAccelMPerS2 float64 // 0 means DefaultProcessAccelMPerS2
	ProcessPositionM   float64 // 0 means DefaultProcessPositionM
	InitialShiftM      float64 // 0 means DefaultInitialShiftM
	InitialLocalM      float64 // 0 means DefaultInitialLocalM
	InitialSpeedMPerS  float64 // 0 means DefaultInitialSpeedMPerS
	GateChi2           float64 // 0 means DefaultGateChi2; +Inf turns gating off
	StaleAfterTicks    int     // 0 means DefaultStaleAfterTicks
	CommandHistory     int     // 0 means DefaultCommandHistory
	MaxPredictSteps    int     // 0 means DefaultMaxPredictSteps

	// MarkerOffsetWalkMPerSqrtS is the random-walk intensity of the marker
	// offsets, m/√s; 0 means DefaultMarkerOffsetWalkMPerSqrtS.
	MarkerOffsetWalkMPerSqrtS float64
	// InitialMarkerOffsetM is the prior standard deviation of each marker
	// offset coordinate, m; 0 means DefaultInitialMarkerOffsetM.
	InitialMarkerOffsetM float64
	// NoMarkerOffsets leaves the marker offsets out of the state: the
	// filter is then the plain EKF over (x_k, x_{k−1}), whose markers
	// measure their nodes exactly up to noise, and MarkerOffsetTo writes
	// zeros. The zero value (false) estimates them.
	NoMarkerOffsets bool
}

func (s EstimatorSettings) withDefaults() (EstimatorSettings, error) {
	def := func(v *float64, d float64, name string) error {
		if math.IsNaN(*v) || *v < 0 {
			return fmt.Errorf("mpc: estimator setting %s = %g must be non-negative", name, *v)
		}
		if *v == 0 {
			*v = d
		}
		return nil
	}
	for _, f := range []struct {
		v    *float64
		d    float64
		name string
	}{
		{&s.ProcessAccelMPerS2, DefaultProcessAccelMPerS2, "ProcessAccelMPerS2"},
		{&s.ProcessPositionM, DefaultProcessPositionM, "ProcessPositionM"},
		{&s.InitialShiftM, DefaultInitialShiftM, "InitialShiftM"},
		{&s.InitialLocalM, DefaultInitialLocalM, "InitialLocalM"},
		{&s.InitialSpeedMPerS, DefaultInitialSpeedMPerS, "InitialSpeedMPerS"},
		{&s.GateChi2, DefaultGateChi2, "GateChi2"},
		{&s.MarkerOffsetWalkMPerSqrtS, DefaultMarkerOffsetWalkMPerSqrtS, "MarkerOffsetWalkMPerSqrtS"},
		{&s.InitialMarkerOffsetM, DefaultInitialMarkerOffsetM, "InitialMarkerOffsetM"},
	} {
		if err := def(f.v, f.d, f.name); err != nil {
			return s, err
		}
	}
	for _, v := range []float64{s.ProcessAccelMPerS2, s.ProcessPositionM, s.InitialShiftM, s.InitialLocalM, s.InitialSpeedMPerS,
		s.MarkerOffsetWalkMPerSqrtS, s.InitialMarkerOffsetM} {
		if math.IsInf(v, 0) {
			return s, fmt.Errorf("mpc: estimator settings must be finite (only GateChi2 may be +Inf)")
		}
	}
	if s.StaleAfterTicks < 0 || s.CommandHistory < 0 || s.MaxPredictSteps < 0 {
		return s, fmt.Errorf("mpc: estimator settings StaleAfterTicks, CommandHistory and MaxPredictSteps must be non-negative")
	}
	if s.MaxPredictSteps == 0 {
		s.MaxPredictSteps = DefaultMaxPredictSteps
	}
	if s.StaleAfterTicks == 0 {
		s.StaleAfterTicks = DefaultStaleAfterTicks
	}
	if s.CommandHistory == 0 {
		s.CommandHistory = DefaultCommandHistory
	}
	return s, nil
}

// MarkerSet says what the tracker sees: which node each marker sits on, how
// noisy a marker coordinate is, and where the tracker frame is.
type MarkerSet struct {
	Nodes          []int    // node index of each marker; a marker is an index into this slice
	NoiseM         float64  // standard deviation of one marker coordinate, m (≥ 0)
	TrackerToWorld sim.Pose // maps tracker-frame positions to the world frame
}

// MarkerObs is one visible marker in an observation.
type MarkerObs struct {
	Marker      int        // index into the estimator's MarkerSet.Nodes (the cell's Markers)
	PosTrackerM [3]float64 // position in the tracker frame, m
}

// RejectedMarker is a marker the innovation gate threw out.
type RejectedMarker struct {
	Marker int     // index into the MarkerSet
	Chi2   float64 // νᵀS⁻¹ν of its innovation
}

// EstimatorReport describes one Observe call. Its slices are reused from
// call to call; pass the same report every tick to stay allocation-free.
type EstimatorReport struct {
	GridTimeS           float64          // the grid time the observation was placed at, s
	CaptureOffsetS      float64          // capture time − grid time, s
	StepsPredicted      int              // process steps from the previous filter time
	Initialised         bool             // this observation initialised the filter (the first one, or one after a gap longer than MaxPredictSteps)
	MarkersSeen         int              // markers in the observation
	MarkersUsed         int              // markers that passed the gate and updated the state
	Rejected            []RejectedMarker // markers the gate rejected and the update did not use, in observation order
	GateOverruled       bool             // most markers failed the gate, so all were used (see the estimator notes)
	UsedPrepared        bool             // the covariance came from Prepare
	TicksWithoutMarkers int              // consecutive observations (this one included) with no accepted marker
	Stale               bool             // TicksWithoutMarkers ≥ StaleAfterTicks
}

// Errors returned by the estimator; they are wrapped with detail.
var (
	ErrBadObservation = errors.New("mpc: bad observation")
	ErrTimeOrder      = errors.New("mpc: time does not move forward")
	ErrNotInitialised = errors.New("mpc: estimator has had no observation yet")
	ErrInnovation     = errors.New("mpc: innovation covariance is not positive definite")
	ErrPredictTooFar  = errors.New("mpc: prediction too far ahead")
)

// Estimator is the extended Kalman filter over one figure. It is a value
// with no clock: every time comes in as an argument. Make one per session
// with NewEstimator; it is not safe for concurrent use.
//
// # State
//
// The state is the figure's positions at two consecutive grid times,
// stacked: s = (x_k, x_{k−1}) ∈ R^{2D}, D = 3·nodes (every node, anchored
// ones included; the process holds those fixed and gives them no process
// noise). This is the state the backward-Euler step in position form works
// on, so the process model is the step itself,
//
//	x_{k+1} = f(x_k, x_{k−1}, q_{k+1}) + h²·w,   w ~ N(0, σ_a²·I),
//
// with q_{k+1} the joints at the end of the step (they place the string
// anchors) and h the step. Its Jacobian is block structured,
//
//	F = [ ∂f/∂x_k  ∂f/∂x_{k−1} ]
//	    [    I          0      ],
//
// and the two blocks are the step's sensitivities (sim's implicit-function
// derivatives). They are never formed: the covariance propagation applies
// them to its columns through the step's band factor (Process.TangentTo;
// see propagate for the cost). Velocities are (x_k − x_{k−1})/h, as in
// the step. The noise
// term is an unmodelled acceleration held over one step: in position form it
// shifts x_{k+1} by h²·w (the position-form counterpart of the discrete
// white-noise acceleration model of Bar-Shalom, Li and Kirubarajan,
// "Estimation with Applications to Tracking and Navigation", 2001, §6.3.3).
// A small position random walk σ_p is added on top (model mismatch that is
// not an acceleration, and the step's own solve tolerance).
//
// # Measurements
//
// A marker observation is the marker's position in the tracker frame; it is
// mapped to the world frame with the cell's tracker→world pose and measures
// its node's position in x_k with independent noise of standard deviation
// σ_m per coordinate (the cell's marker noise; a rotation keeps isotropic
// noise isotropic). A marker that is not in an observation is simply not
// measured. Each marker is gated on its own innovation ν against the
// predicted state: with S = P_nn + σ_m²·I its 3×3 innovation covariance, a
// marker with νᵀS⁻¹ν above the gate (default the 99.9 % quantile of the
// chi-square distribution with 3 degrees of freedom, 16.266) is rejected and
// listed in the report. One exception: when more than half of an
// observation's markers, and at least two, fail the gate, the state is
// taken to be off rather than the markers (a push, a knock), every marker
// is used and the report says GateOverruled; otherwise a pushed figure would
// reject every marker from then on. The markers used are applied in one
// batch update.
//
// # Marker offsets
//
// Unless NoMarkerOffsets is set, the state also holds one offset per
// marker, o ∈ R^{3·markers} (world frame, m, three per marker in MarkerSet
// order), s = (x_k, x_{k−1}, o), and a marker measures its node plus its
// offset:
//
//	y_m = x_k[node(m)] + o_m + v,   o_{k+1} = o_k + w_o,  w_o ~ N(0, σ_o²·h·I),
//
// a random walk of intensity σ_o (MarkerOffsetWalkMPerSqrtS, m/√s) that the
// process step does not touch: F = blkdiag(F_x, I). This is the output
// disturbance model of offset-free model predictive control (Muske &
// Badgwell 2002, "Disturbance modeling for offset-free linear model
// predictive control", J. Process Control 12; Pannocchia & Rawlings 2003,
// AIChE J. 49): the model pins x, since holding the figure away from where
// the model lets it hang would take a sustained acceleration the process
// noise makes improbable, and o absorbs whatever the model cannot explain
// (strings a few percent long, a tracker slightly off). At a steady state
// the innovations average zero, so x is a fixed point of the model and
// p(x) + o is the observed marker position: a planner that tracks
// p(x) + o instead of p(x) removes the static error (Planner.SetMarkerOffset).
// Read the offsets with MarkerOffsetTo. The prior at initialisation is
// zero with standard deviation InitialMarkerOffsetM per coordinate,
// independent of x; Reset and a re-initialisation forget the offsets.
// Cost: the state grows from 2D to 2D + 3·markers (120 to 150 on the demo
// figure), and the propagation applies the step's Jacobian to the offset
// columns too.
//
// # Timing (all times are cue times in seconds)
//
// The filter lives on a grid t_k = t₀ + k·h, where t₀ is the capture time of
// the first observation after construction or Reset and h the process step
// (normally the cell's tick). Observe rounds a capture time to the nearest
// grid time (the difference is reported) and requires it to be later than
// the filter's current grid time; it predicts the filter from its time to the
// capture time, one step per grid interval, then updates with the markers.
// An observation more than MaxPredictSteps steps after the filter's time
// initialises the filter afresh (the report says so), as after Reset.
//
// Joints along the way: the joints at a grid time t come from a piecewise
// linear joint path through these points, in time order: the measured
// joints of the previous observation (at the filter's time), every command
// recorded with RecordCommand whose apply time lies strictly between that
// and the capture time, and the measured joints of this observation (at the
// capture time). So a step that ends at the capture time uses the measured
// joints exactly.
//
// Latency compensation: PredictTo advances the filtered mean (not the
// covariance, which the planner does not use) from the filter's time to the
// time the next command will apply, with joints from the path through the
// measured joints at the filter's time and every recorded command after it;
// beyond the last recorded command the joints hold its value. A command
// recorded with apply time τ means "the arm is told to be at these joints
// at τ". Arms lag their commands, so every command point of this path is
// shifted by the tracking offset last seen: the measured joints at the
// filter's time minus the commands interpolated at that time (zero when the
// recorded commands do not span it). Record each command once it is sent,
// and, if the joints for the apply time itself are known (the nominal plus
// the correction in force), record them too.
//
// # Per tick
//
// A session's tick, in order:
//
//  1. Observe the frame (its capture time, the joints measured at that
//     time, the visible markers); act on the report (Stale: coast). The
//     joints must be those of the capture time: a tracker frame is older
//     than the joints measured with it, and joints one latency ahead of
//     the markers move the string anchors ahead of the figure (on the demo
//     that cost 3.5 mm of closed-loop RMS error; the server interpolates
//     its recent measurements).
//  2. RecordCommand the best guess of the joints at the coming apply time
//     (the nominal plus the correction in force), then PredictTo that
//     time: the planner's initial state. MarkerOffsetTo gives the marker
//     offsets for Planner.SetMarkerOffset (they do not change with the
//     prediction: a random walk's mean stays put).
//  3. Plan and guard, then RecordCommand the joints actually sent for that
//     apply time (it replaces the guess).
//  4. Optionally, while waiting for the next frame, Prepare for its
//     capture time: the covariance propagation then happens off the path
//     from observation to command.
//
// # Failures
//
// Observations with a NaN or infinite value, unknown or repeated markers, a
// joint vector of the wrong length or a time that does not move forward are
// errors; so is a step that does not converge or an innovation covariance
// that is not positive definite. On any error the estimator is left exactly
// as it was before the call. The last two mean the state itself is unusable
// (it makes the model fail, or the covariance lost definiteness): Reset,
// and the next observation initialises the filter again.
//
// # Lost markers
//
// The report counts consecutive observations that brought no accepted
// marker (none visible, or all rejected) and says Stale once the count
// reaches StaleAfterTicks; the filter keeps predicting on the model alone
// meanwhile, and the caller decides when to stop trusting it (the server
// coasts).
type Estimator struct {
	proc    Process
	markers MarkerSet
	set     EstimatorSettings
	d       int // positions per state half
	no      int // marker offset coordinates in the state: 3·markers, or 0 with NoMarkerOffsets
	n       int // state length, 2·d + no
	nj      int // joints
	h       float64
	fixed   []bool // per coordinate: held by the process

	// Committed filter state.
	init      bool
	t0        float64 // first capture time, s
	k         int64   // grid index of the filter state
	mean      []float64
	cov       []float64 // n×n row-major, full (both triangles)
	joints    []float64 // measured joints at the filter time
	noMarkers int

	cmds commandRing

	// Prepared covariance (see Prepare).
	prepared    bool
	prepFrom    int64 // filter grid index it was prepared from
	prepTo      int64 // grid index it was prepared for
	pMean, pCov []float64
	bias        []float64 // the arm's tracking offset (joints), see pathJoints

	// Scratch.
	wMean, wCov []float64 // working copies, committed on success
	stepNext    []float64
	top, bot    mat.Dense  // views of the two halves of a covariance's rows (D×2D)
	tMat        *mat.Dense // T = G·P (D×2D)
	tt1, tt2    *mat.Dense // the two halves of Tᵀ (D×D each)
	s11         *mat.Dense // G·Tᵀ (D×D)
	qStep       []float64
	seen        []bool // per marker, duplicates check
	accepted    []int  // accepted markers of this observation (indices into the observation)
	world       [][3]float64
	innov       []float64 // 3m
	sMat        []float64 // (3m)², innovation covariance, then its Cholesky factor
	wt          []float64 // 3m × 2D: rows of P for the measured coordinates, then L⁻¹ of them
	predJoints  []float64
	predCur     []float64
	predPrev    []float64
	predNext    []float64
	variances   []float64 // process noise variance per coordinate of x_{k+1}, then per marker offset coordinate
}

// NewEstimator makes an estimator for a process (the figure's step) and the
// markers that observe it. It sizes every buffer once.
func NewEstimator(p Process, m MarkerSet, s EstimatorSettings) (*Estimator, error) {
	s, err := s.withDefaults()
	if err != nil {
		return nil, err
	}
	d, nj, h := p.Dim(), p.NumJoints(), p.StepS()
	if d <= 0 || d%3 != 0 {
		return nil, fmt.Errorf("mpc: process dimension %d is not a positive multiple of 3", d)
	}
	if nj < 0 || !(h > 0) || math.IsInf(h, 0) {
		return nil, fmt.Errorf("mpc: process has %d joints and step %g s", nj, h)
	}
	if !(m.NoiseM >= 0) || math.IsInf(m.NoiseM, 0) {
		return nil, fmt.Errorf("mpc: marker noise %g m must be non-negative and finite", m.NoiseM)
	}
	for i, n := range m.Nodes {
		if n < 0 || 3*n >= d {
			return nil, fmt.Errorf("mpc: marker %d sits on node %d; the figure has %d nodes", i, n, d/3)
		}
	}
	for _, v := range append(m.TrackerToWorld.R[:], m.TrackerToWorld.P[:]...) {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, fmt.Errorf("mpc: tracker→world pose is not finite")
		}
	}
	nm := len(m.Nodes)
	no := 3 * nm
	if s.NoMarkerOffsets {
		no = 0
	}
	n := 2*d + no
	e := &Estimator{
		proc:       p,
		markers:    MarkerSet{Nodes: append([]int(nil), m.Nodes...), NoiseM: m.NoiseM, TrackerToWorld: m.TrackerToWorld},
		set:        s,
		d:          d,
		no:         no,
		n:          n,
		nj:         nj,
		h:          h,
		fixed:      make([]bool, d),
		mean:       make([]float64, n),
		cov:        make([]float64, n*n),
		joints:     make([]float64, nj),
		cmds:       newCommandRing(s.CommandHistory, nj),
		wMean:      make([]float64, n),
		wCov:       make([]float64, n*n),
		pMean:      make([]float64, n),
		pCov:       make([]float64, n*n),
		bias:       make([]float64, nj),
		stepNext:   make([]float64, d),
		tMat:       mat.NewDense(d, n, nil),
		tt1:        mat.NewDense(d, d, nil),
		tt2:        mat.NewDense(d, d, nil),
		s11:        mat.NewDense(d, d, nil),
		qStep:      make([]float64, nj),
		seen:       make([]bool, nm),
		accepted:   make([]int, 0, nm),
		world:      make([][3]float64, nm),
		innov:      make([]float64, 3*nm),
		sMat:       make([]float64, 9*nm*nm),
		wt:         make([]float64, 3*nm*n),
		predJoints: make([]float64, nj),
		predCur:    make([]float64, d),
		predPrev:   make([]float64, d),
		predNext:   make([]float64, d),
		variances:  make([]float64, d+no),
	}
	for i := range e.fixed {
		e.fixed[i] = p.Fixed(i)
	}
	return e, nil
}

// Reset forgets the state and the command history; the next observation
// initialises the filter again.
func (e *Estimator) Reset() {
	e.init = false
	e.prepared = false
	e.k = 0
	e.noMarkers = 0
	e.cmds.clear()
}

// Initialised reports whether the filter holds a state.
func (e *Estimator) Initialised() bool { return e.init }

// StepS is the filter's grid step h, s.
func (e *Estimator) StepS() float64 { return e.h }

// TimeS is the grid time of the filtered state, s (0 before the first
// observation).
func (e *Estimator) TimeS() float64 {
	if !e.init {
		return 0
	}
	return e.gridTime(e.k)
}

func (e *Estimator) gridTime(k int64) float64 { return e.t0 + float64(k)*e.h }

// StateTo writes the filtered state at TimeS: the positions xCur at that
// time and xPrev one step earlier (each of length Dim). It panics before the
// first observation.
func (e *Estimator) StateTo(xCur, xPrev []float64) {
	if !e.init {
		panic("mpc: StateTo before the first observation")
	}
	if len(xCur) != e.d || len(xPrev) != e.d {
		panic("mpc: StateTo: wrong length")
	}
	copy(xCur, e.mean[:e.d])
	copy(xPrev, e.mean[e.d:2*e.d])
}

// PositionVarianceTo writes the filter's variance of every position
// coordinate at TimeS (m², length Dim). It panics before the first
// observation.
func (e *Estimator) PositionVarianceTo(dst []float64) {
	if !e.init {
		panic("mpc: PositionVarianceTo before the first observation")
	}
	if len(dst) != e.d {
		panic("mpc: PositionVarianceTo: wrong length")
	}
	n := e.n
	for i := range dst {
		dst[i] = e.cov[i*n+i]
	}
}

// Dim is the length of a position vector (3·nodes).
func (e *Estimator) Dim() int { return e.d }

// NumMarkerOffsets is the number of marker offset coordinates the filter
// estimates: 3·markers, or 0 with NoMarkerOffsets.
func (e *Estimator) NumMarkerOffsets() int { return e.no }

// MarkerOffsetTo writes the estimated marker offsets into dst (length
// 3·markers, world frame, m, three per marker in MarkerSet order): what
// each marker is observed to sit from its node where the model puts it
// (see Marker offsets on Estimator). It writes zeros before the first
// observation and with NoMarkerOffsets. It panics if dst has the wrong
// length.
func (e *Estimator) MarkerOffsetTo(dst []float64) {
	if len(dst) != 3*len(e.markers.Nodes) {
		panic("mpc: MarkerOffsetTo: wrong length")
	}
	if !e.init || e.no == 0 {
		clear(dst)
		return
	}
	copy(dst, e.mean[2*e.d:])
}
