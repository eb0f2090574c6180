package sim

import (
	"fmt"
	"math"
)

// Node is one point mass of a figure.
type Node struct {
	Name       string     // unique within the figure
	MassKg     float64    // > 0
	PositionM  [3]float64 // initial position in the world frame
	DragNsPerM float64    // ≥ 0; drag force −DragNsPerM·velocity on this node
	Anchored   bool       // fixed in the world at PositionM
}

// Rod is a stiff elastic link between two nodes, with axial damping.
type Rod struct {
	A, B           int     // node indices, A ≠ B
	RestLengthM    float64 // > 0
	StiffnessNPerM float64 // > 0
	DampingNsPerM  float64 // ≥ 0; damps the rate of change of the rod's length
}

// Figure is the suspended body: point masses joined by rods. It is plain
// data; NewModel turns it into something that can be stepped.
type Figure struct {
	Nodes []Node
	Rods  []Rod
}

// NodeIndex returns the index of the node with the given name, or -1.
func (f *Figure) NodeIndex(name string) int {
	for i := range f.Nodes {
		if f.Nodes[i].Name == name {
			return i
		}
	}
	return -1
}

// Clone returns a deep copy of f.
func (f *Figure) Clone() *Figure {
	return &Figure{
		Nodes: append([]Node(nil), f.Nodes...),
		Rods:  append([]Rod(nil), f.Rods...),
	}
}

// Validate checks the invariants a model relies on: at least one node,
// positive finite masses, finite positions, non-negative finite drag and
// damping, rods between two distinct existing nodes with positive finite
// rest length and stiffness. It returns the first problem found.
// ParseFigure reports every problem with its place in the file; Validate is
// for figures built in code.
func (f *Figure) Validate() error {
	if len(f.Nodes) == 0 {
		return fmt.Errorf("sim: figure has no nodes")
	}
	for i, n := range f.Nodes {
		if !(n.MassKg > 0) || math.IsInf(n.MassKg, 0) {
			return fmt.Errorf("sim: node %d (%q): mass %g kg must be positive and finite", i, n.Name, n.MassKg)
		}
		for _, p := range n.PositionM {
			if math.IsNaN(p) || math.IsInf(p, 0) {
				return fmt.Errorf("sim: node %d (%q): position %v is not finite", i, n.Name, n.PositionM)
			}
		}
		if !(n.DragNsPerM >= 0) || math.IsInf(n.DragNsPerM, 0) {
			return fmt.Errorf("sim: node %d (%q): drag %g N·s/m must be non-negative and finite", i, n.Name, n.DragNsPerM)
		}
	}
	for i, r := range f.Rods {
		if r.A < 0 || r.A >= len(f.Nodes) || r.B < 0 || r.B >= len(f.Nodes) {
			return fmt.Errorf("sim: rod %d joins nodes %d and %d; the figure has %d nodes", i, r.A, r.B, len(f.Nodes))
		}
		if r.A == r.B {
			return fmt.Errorf("sim: rod %d joins node %d to itself", i, r.A)
		}
		if !(r.RestLengthM > 0) || math.IsInf(r.RestLengthM, 0) {
			return fmt.Errorf("sim: rod %d: rest length %g m must be positive and finite", i, r.RestLengthM)
		}
		if !(r.StiffnessNPerM > 0) || math.IsInf(r.StiffnessNPerM, 0) {
			return fmt.Errorf("sim: rod %d: stiffness %g N/m must be positive and finite", i, r.StiffnessNPerM)
		}
		if !(r.DampingNsPerM >= 0) || math.IsInf(r.DampingNsPerM, 0) {
			return fmt.Errorf("sim: rod %d: damping %g N·s/m must be non-negative and finite", i, r.DampingNsPerM)
		}
	}
	return nil
}
