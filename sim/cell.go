package sim

import "math"

// CellFormat is the format string every cell file must carry.
const CellFormat = "tautline.cell/1"

// Cell is one robot work cell as a value: arms, bars, strings, figure,
// markers, tracker and timing. It is built by ParseCell and never changes
// afterwards; per-call scratch lives in a CellWorkspace.
//
// The cell's joint vector q concatenates the movable joints of every arm in
// file order, each arm's joints from base to tip. Joint i is named
// "<arm>.<joint>" (JointNames), a name that stays stable across versions of
// a cell as long as the arm and joint names do.
type Cell struct {
	Name  string
	TickS float64 // control period, s

	Arms    []CellArm
	Bars    []Bar
	Figure  *Figure
	Strings []CellString
	Markers []Marker

	TrackerToWorld Pose    // maps tracker-frame marker positions to the world frame
	MarkerNoiseM   float64 // standard deviation of one marker coordinate, m

	Planner PlannerDefaults

	// Sources are the bytes of every file the cell was read from (the cell
	// file first, then figure and URDF files), so a capture can embed them
	// and replay on its own.
	Sources []SourceFile

	jointNames []string
	limits     []JointLimit
}

// SourceFile is one input file's name (as resolved by the loader) and bytes.
type SourceFile struct {
	Path string
	Data []byte
}

// CellArm is one arm of the cell: a kinematic chain placed in the world.
type CellArm struct {
	Name   string
	Chain  *Chain
	Base   Pose         // base link frame in the world
	Home   []float64    // joint positions at the home pose (rad or m), chain order
	Limits []JointLimit // effective limits, chain order (URDF tightened by the cell file)
	Offset int          // index of the arm's first joint in the cell's joint vector
}

// JointLimit is the effective set of limits of one joint. Positions are in
// rad (revolute, continuous) or m (prismatic); a continuous joint has
// infinite position limits.
type JointLimit struct {
	Name        string  // "<arm>.<joint>"
	Lower       float64 // rad or m
	Upper       float64 // rad or m
	MaxVelocity float64 // rad/s or m/s
	MaxAccel    float64 // rad/s² or m/s²
}

// Bar is a rigid control bar fixed to an arm's tip link.
type Bar struct {
	Name   string
	Arm    int
	Points []BarPoint
}

// BarPoint is a named point on a bar, in the arm's tip frame, m.
type BarPoint struct {
	Name      string
	PositionM [3]float64
}

// CellString is a tension-only string from a bar point to a figure node.
type CellString struct {
	BarPoint       string     // "<bar>.<point>"
	Arm            int        // arm carrying the bar
	PointTipM      [3]float64 // the bar point in that arm's tip frame, m
	Node           int        // figure node index
	RestLengthM    float64
	StiffnessNPerM float64
}

// Marker is a tracked point on a figure node.
type Marker struct {
	ID   string
	Node int
}

// PlannerDefaults are the cell's planner settings as written in the cell
// file. A zero field means "use the planner's documented default"; package
// mpc interprets them. Joint-space quantities are in rad (or m for
// prismatic joints).
type PlannerDefaults struct {
	HorizonSteps     int     `json:"horizon_steps"`
	HorizonStepS     float64 `json:"horizon_step_s"`
	TrackingWeight   float64 `json:"tracking_weight"`   // per m² of marker error
	NominalWeight    float64 `json:"nominal_weight"`    // per rad² of deviation from the cue
	SmoothnessWeight float64 `json:"smoothness_weight"` // per (rad/s²)² of joint acceleration
	MaxDeviation     float64 `json:"max_deviation"`     // |q − q̄| bound, rad or m
	PositionMargin   float64 `json:"position_margin"`   // kept clear of position limits, rad or m
	MaxIterations    int     `json:"max_iterations"`    // Gauss-Newton iterations per tick
}

// NumJoints is the length of the cell's joint vector.
func (c *Cell) NumJoints() int { return len(c.jointNames) }

// JointNames returns "<arm>.<joint>" for every entry of the joint vector.
// The slice is shared; do not modify it.
func (c *Cell) JointNames() []string { return c.jointNames }

// JointLimits returns the effective limits of every joint, in joint-vector
// order. The slice is shared; do not modify it.
func (c *Cell) JointLimits() []JointLimit { return c.limits }

// HomeTo writes the home pose of every arm into dst (len NumJoints).
func (c *Cell) HomeTo(dst []float64) {
	if len(dst) != c.NumJoints() {
		panic("sim: HomeTo: wrong length")
	}
	for _, a := range c.Arms {
		copy(dst[a.Offset:], a.Home)
	}
}

// NumAnchors is the number of strings (each has one anchor point).
func (c *Cell) NumAnchors() int { return len(c.Strings) }

// StringLinks returns the strings in the form the figure model takes.
func (c *Cell) StringLinks() []StringLink {
	out := make([]StringLink, len(c.Strings))
	for i, s := range c.Strings {
		out[i] = StringLink{Node: s.Node, RestLengthM: s.RestLengthM, StiffnessNPerM: s.StiffnessNPerM}
	}
	return out
}

// NewModel builds the figure model of the cell for time step stepS.
func (c *Cell) NewModel(stepS float64) (*Model, error) {
	return NewModel(c.Figure, c.StringLinks(), ModelSettings{StepS: stepS})
}

// MarkerNode returns the node index of marker id, or -1.
func (c *Cell) MarkerNode(id string) int {
	for _, m := range c.Markers {
		if m.ID == id {
			return m.Node
		}
	}
	return -1
}

// TotalMassKg is the figure's total mass.
func (c *Cell) TotalMassKg() float64 {
	var m float64
	for _, n := range c.Figure.Nodes {
		m += n.MassKg
	}
	return m
}

func cellFinite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }
