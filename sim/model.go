package sim

import (
	"errors"
	"fmt"
	"math"
)

// StandardGravityMPerS2 is standard gravity (the conventional value, BIPM).
const StandardGravityMPerS2 = 9.80665

// Defaults used when a ModelSettings field is zero.
const (
	// DefaultSlackWidthM is the width of a string's tension ramp: within
	// ±0.05 mm of its rest length a string's stiffness blends smoothly from
	// zero to full. Small next to the stretch of a loaded string, large
	// enough that Newton's method crosses it without trouble.
	DefaultSlackWidthM = 1e-4
	// DefaultGradTolM is the mass-scaled gradient tolerance of a step:
	// the step has converged when every free node's residual force times
	// h²/m is below it, i.e. the position error it implies is below 0.1 nm.
	DefaultGradTolM = 1e-10
	// DefaultMaxNewtonIters bounds the Newton iterations of one step.
	DefaultMaxNewtonIters = 50
)

// Errors returned for numerical trouble. They are wrapped with detail;
// test for them with errors.Is.
var (
	ErrNotFinite     = errors.New("sim: a state or anchor value is NaN or infinite")
	ErrNoConvergence = errors.New("sim: the step did not converge")
	ErrIndefinite    = errors.New("sim: the step's Hessian at the solution is not positive definite (reduce the step or stiffen the figure)")
)

// StringLink is a tension-only string from an anchor point (an input of
// every step, carried by a bar) to a figure node.
type StringLink struct {
	Node           int     // figure node index
	RestLengthM    float64 // > 0
	StiffnessNPerM float64 // > 0
}

// ModelSettings configures a Model. The zero value of each field except
// StepS means the documented default.
type ModelSettings struct {
	StepS          float64 // time step h in seconds; required, > 0
	GravityMPerS2  float64 // 0 means StandardGravityMPerS2
	NoGravity      bool    // true turns gravity off (GravityMPerS2 is then ignored)
	SlackWidthM    float64 // width of the string tension ramp; 0 means DefaultSlackWidthM
	GradTol        float64 // mass-scaled gradient tolerance in metres; 0 means DefaultGradTolM
	MaxNewtonIters int     // 0 means DefaultMaxNewtonIters
}

// Model is a figure with its strings, ready to be stepped. It is immutable
// after NewModel and may be shared by any number of Workspaces.
type Model struct {
	fig      *Figure
	nNodes   int
	h        float64
	gravity  float64
	slackW   float64
	gradTol  float64
	maxIters int

	mass     []float64 // per node
	drag     []float64 // per node
	anchored []bool    // per node
	fixedPos []float64 // 3 per node: file positions, used for anchored nodes
	rods     []modelRod
	strs     []StringLink

	// Band ordering of the free nodes (reverse Cuthill–McKee).
	slot  []int // node → position in the band order, -1 for anchored nodes
	order []int // band position → node
	kd    int   // scalar half-bandwidth of the free-node Hessian

	// firstHess is the Hessian tried first for Newton directions:
	// hessExact, or hessProjected to always project (for comparison in
	// benchmarks).
	firstHess hessMode
}

type modelRod struct {
	a, b    int
	restLen float64
	k       float64
	c       float64
}

// NewModel builds a model of fig hung from strs. The figure is copied.
// Every non-anchored node is a degree of freedom; at least one is needed.
func NewModel(fig *Figure, strs []StringLink, s ModelSettings) (*Model, error) {
	if err := fig.Validate(); err != nil {
		return nil, err
	}
	if !(s.StepS > 0) || math.IsInf(s.StepS, 0) {
		return nil, fmt.Errorf("sim: step %g s must be positive and finite", s.StepS)
	}
	n := len(fig.Nodes)
	m := &Model{
		fig:      fig.Clone(),
		nNodes:   n,
		h:        s.StepS,
		gravity:  s.GravityMPerS2,
		slackW:   s.SlackWidthM,
		gradTol:  s.GradTol,
		maxIters: s.MaxNewtonIters,
		mass:     make([]float64, n),
		drag:     make([]float64, n),
		anchored: make([]bool, n),
		fixedPos: make([]float64, 3*n),
		strs:     append([]StringLink(nil), strs...),

		firstHess: hessExact,
	}
	if m.gravity == 0 {
		m.gravity = StandardGravityMPerS2
	}
	if s.NoGravity {
		m.gravity = 0
	}
	if m.slackW == 0 {
		m.slackW = DefaultSlackWidthM
	}
	if m.gradTol == 0 {
		m.gradTol = DefaultGradTolM
	}
	if m.maxIters == 0 {
		m.maxIters = DefaultMaxNewtonIters
	}
	if !(m.slackW > 0) || !(m.gradTol > 0) || m.maxIters < 0 || math.IsNaN(m.gravity) || math.IsInf(m.gravity+m.slackW+m.gradTol, 0) {
		return nil, fmt.Errorf("sim: bad model settings %+v", s)
	}
	free := make([]bool, n)
	nFree := 0
	for i, nd := range fig.Nodes {
		m.mass[i], m.drag[i], m.anchored[i] = nd.MassKg, nd.DragNsPerM, nd.Anchored
		copy(m.fixedPos[3*i:3*i+3], nd.PositionM[:])
		free[i] = !nd.Anchored
		if free[i] {
			nFree++
		}
	}
	if nFree == 0 {
		return nil, fmt.Errorf("sim: every node of the figure is anchored; nothing to simulate")
	}
	edges := make([][2]int, len(fig.Rods))
	for i, r := range fig.Rods {
		m.rods = append(m.rods, modelRod{a: r.A, b: r.B, restLen: r.RestLengthM, k: r.StiffnessNPerM, c: r.DampingNsPerM})
		edges[i] = [2]int{r.A, r.B}
	}
	for i, st := range strs {
		if st.Node < 0 || st.Node >= n {
			return nil, fmt.Errorf("sim: string %d hangs node %d; the figure has %d nodes", i, st.Node, n)
		}
		if !(st.RestLengthM > 0) || math.IsInf(st.RestLengthM, 0) {
			return nil, fmt.Errorf("sim: string %d: rest length %g m must be positive and finite", i, st.RestLengthM)
		}
		if !(st.StiffnessNPerM > 0) || math.IsInf(st.StiffnessNPerM, 0) {
			return nil, fmt.Errorf("sim: string %d: stiffness %g N/m must be positive and finite", i, st.StiffnessNPerM)
		}
	}
	var nodeBand int
	m.slot, m.order, nodeBand = bandOrder(n, free, edges)
	m.kd = 3*nodeBand + 2
	return m, nil
}

// Dim is the length of a state vector: 3 × the number of nodes, all of them.
// Node i is at [3i:3i+3]. Anchored nodes stay at their file positions.
func (m *Model) Dim() int { return 3 * m.nNodes }

// NumAnchors is the number of strings; an anchor vector has 3×NumAnchors
// entries, string i's anchor point at [3i:3i+3].
func (m *Model) NumAnchors() int { return len(m.strs) }

// StepS is the model's time step in seconds.
func (m *Model) StepS() float64 { return m.h }

// Figure returns a copy of the model's figure.
func (m *Model) Figure() *Figure { return m.fig.Clone() }

// Strings returns a copy of the model's strings.
func (m *Model) Strings() []StringLink { return append([]StringLink(nil), m.strs...) }

// InitialState writes the figure's file positions into dst (length Dim).
func (m *Model) InitialState(dst []float64) {
	if len(dst) != m.Dim() {
		panic("sim: InitialState: wrong length")
	}
	copy(dst, m.fixedPos)
}

// HalfBandwidth is the number of sub-diagonals of the step's Hessian in the
// model's node order (3 × the node bandwidth of the reverse Cuthill–McKee
// order, plus 2).
func (m *Model) HalfBandwidth() int { return m.kd }
