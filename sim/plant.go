package sim

import (
	"fmt"
	"math"
	"math/rand/v2"
)

// Plant is a simulated cell: the cell's figure with a mismatch profile
// applied, joint servos that lag their commands, and a tracker that sees
// markers late, noisily and not always. Rehearsals and tests drive it in
// place of a real cell. It is deterministic given the profile's seed.
//
// Time is cue time in seconds: Settle sets it, each Advance adds one tick.
type Plant struct {
	cell  *Cell
	prof  MismatchProfile
	model *Model
	ws    *CellWorkspace
	rng   *rand.Rand

	x, xPrev, xNext []float64
	q               []float64 // actual joint positions
	t               float64
	servoAlpha      float64

	lagTicks int
	// history holds the last lagTicks+1 captured states (joints, node
	// positions) as a ring, newest at head.
	histQ, histX [][]float64
	histT        []float64
	head, filled int
	pushed       []bool
	pushNode     []int
}

// PlantObservation is what the simulated tracker and joint encoders report
// on one tick. Marker positions are in the tracker frame, m, 3 per marker in
// the cell's marker order; hidden markers have Visible false and NaN
// positions.
type PlantObservation struct {
	CaptureTimeS float64
	Joints       []float64
	Visible      []bool
	MarkersM     []float64
}

// NewPlantObservation returns an observation sized for the cell.
func NewPlantObservation(cell *Cell) *PlantObservation {
	return &PlantObservation{
		Joints:   make([]float64, cell.NumJoints()),
		Visible:  make([]bool, len(cell.Markers)),
		MarkersM: make([]float64, 3*len(cell.Markers)),
	}
}

// NewPlant builds a simulated cell from cell and a mismatch profile (nil
// means a perfect model and tracker).
func NewPlant(cell *Cell, prof *MismatchProfile) (*Plant, error) {
	var p MismatchProfile
	if prof != nil {
		p = *prof
	}
	rng := rand.New(rand.NewPCG(p.Seed, 0x7a11))
	fig, strs := ApplyMismatch(cell, &p, rng)
	model, err := NewModel(fig, strs, ModelSettings{StepS: cell.TickS})
	if err != nil {
		return nil, fmt.Errorf("plant model: %w", err)
	}
	pl := &Plant{cell: cell, prof: p, model: model, ws: cell.NewWorkspace(model), rng: rng}
	n := model.Dim()
	pl.x, pl.xPrev, pl.xNext = make([]float64, n), make([]float64, n), make([]float64, n)
	pl.q = make([]float64, cell.NumJoints())
	pl.servoAlpha = 1
	if p.ServoTimeConstantS > 0 {
		pl.servoAlpha = 1 - math.Exp(-cell.TickS/p.ServoTimeConstantS)
	}
	pl.lagTicks = int(math.Round(p.LatencyS / cell.TickS))
	for i := 0; i <= pl.lagTicks; i++ {
		pl.histQ = append(pl.histQ, make([]float64, len(pl.q)))
		pl.histX = append(pl.histX, make([]float64, n))
		pl.histT = append(pl.histT, 0)
	}
	pl.pushed = make([]bool, len(p.Pushes))
	for i, pu := range p.Pushes {
		idx := -1
		if pu.Node != "" {
			if idx = cell.Figure.NodeIndex(pu.Node); idx < 0 {
				return nil, fmt.Errorf("push %d: the figure has no node %q", i, pu.Node)
			}
		}
		pl.pushNode = append(pl.pushNode, idx)
	}
	return pl, nil
}

// Model returns the plant's (mismatched) figure model.
func (p *Plant) Model() *Model { return p.model }

// Settle puts the arms at q0 and the figure at rest there, at cue time t0.
func (p *Plant) Settle(q0 []float64, t0 float64) error {
	copy(p.q, q0)
	a := make([]float64, 3*p.cell.NumAnchors())
	p.ws.AnchorsTo(a, q0)
	if err := p.model.RestPose(p.ws.StepWorkspace(), p.x, a); err != nil {
		return fmt.Errorf("plant rest pose: %w", err)
	}
	copy(p.xPrev, p.x)
	p.t = t0
	p.head, p.filled = 0, 0
	for i := range p.pushed {
		p.pushed[i] = false
	}
	p.record()
	return nil
}

func (p *Plant) record() {
	p.head = (p.head + 1) % len(p.histT)
	copy(p.histQ[p.head], p.q)
	copy(p.histX[p.head], p.x)
	p.histT[p.head] = p.t
	if p.filled < len(p.histT) {
		p.filled++
	}
}

// Advance applies joint command qCmd for one tick: the servos move towards
// it, the figure steps, pushes due in this tick are applied.
func (p *Plant) Advance(qCmd []float64) error {
	if len(qCmd) != len(p.q) {
		panic("sim: Plant.Advance: wrong joint vector length")
	}
	for i, c := range qCmd {
		if !cellFinite(c) {
			return fmt.Errorf("plant: joint command %d is %v", i, c)
		}
		p.q[i] += p.servoAlpha * (c - p.q[i])
	}
	h := p.cell.TickS
	for i, pu := range p.prof.Pushes {
		if p.pushed[i] || pu.AtS > p.t {
			continue
		}
		p.pushed[i] = true
		for n := range p.cell.Figure.Nodes {
			if (p.pushNode[i] >= 0 && p.pushNode[i] != n) || p.cell.Figure.Nodes[n].Anchored {
				continue
			}
			for k := 0; k < 3; k++ {
				p.xPrev[3*n+k] -= pu.VelocityMPerS[k] * h
			}
		}
	}
	if err := p.ws.Step(p.xNext, p.x, p.xPrev, p.q); err != nil {
		return fmt.Errorf("plant step at t=%.3f s: %w", p.t, err)
	}
	p.xPrev, p.x, p.xNext = p.x, p.xNext, p.xPrev
	p.t += h
	p.record()
	return nil
}

// TimeS is the plant's current cue time.
func (p *Plant) TimeS() float64 { return p.t }

// Nodes returns the true node positions now (shared; do not modify).
func (p *Plant) Nodes() []float64 { return p.x }

// Joints returns the true joint positions now (shared; do not modify).
func (p *Plant) Joints() []float64 { return p.q }

// Observe fills o with what the tracker and encoders report now: the state
// captured LatencyS ago (or the oldest one kept, just after Settle), marker
// positions in the tracker frame with noise, some markers hidden.
func (p *Plant) Observe(o *PlantObservation) {
	back := p.lagTicks
	if back > p.filled-1 {
		back = p.filled - 1
	}
	i := (p.head - back + len(p.histT)) % len(p.histT)
	o.CaptureTimeS = p.histT[i]
	copy(o.Joints, p.histQ[i])
	x := p.histX[i]
	toTracker := p.cell.TrackerToWorld.Inverse()
	for m, mk := range p.cell.Markers {
		hidden := p.prof.OcclusionProbability > 0 && p.rng.Float64() < p.prof.OcclusionProbability
		var noise [3]float64
		for k := range noise {
			noise[k] = p.prof.MarkerNoiseM * p.rng.NormFloat64()
		}
		if hidden {
			o.Visible[m] = false
			o.MarkersM[3*m], o.MarkersM[3*m+1], o.MarkersM[3*m+2] = math.NaN(), math.NaN(), math.NaN()
			continue
		}
		w := [3]float64{x[3*mk.Node], x[3*mk.Node+1], x[3*mk.Node+2]}
		pt := toTracker.Apply(w)
		o.Visible[m] = true
		for k := 0; k < 3; k++ {
			o.MarkersM[3*m+k] = pt[k] + noise[k]
		}
	}
}
