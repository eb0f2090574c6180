package sim

import (
	"fmt"
	"math"
	"sort"
	"strings"
)

// FitParamKind names a kind of cell parameter that a fit to recorded
// motion can adjust (FitParam). It differs from ParamKind, which names one
// element's value, in two ways: a scale moves a whole group of elements
// together (relative to the nominal cell), and the tracker offset is a
// parameter of the cell, not of the figure model.
type FitParamKind int

// The fit parameter kinds and their units.
const (
	// FitStringRestLength is one string's rest length, m; Index: string.
	FitStringRestLength FitParamKind = iota
	// FitStringStiffness is one string's stiffness, N/m; Index: string.
	FitStringStiffness
	// FitNodeMass is one node's mass, kg; Index: node.
	FitNodeMass
	// FitMassScale multiplies the nominal masses of the nodes in Nodes
	// (1 is nominal): one scale for a group of nodes.
	FitMassScale
	// FitDragScale multiplies every node's nominal drag (1 is nominal).
	FitDragScale
	// FitRodDampingScale multiplies every rod's nominal damping (1 is
	// nominal).
	FitRodDampingScale
	// FitTrackerOffset is one coordinate of the tracker→world translation
	// (the tracker frame's origin in the world), m; Index: axis 0, 1, 2.
	FitTrackerOffset
)

// FitParam is one scalar parameter of a fit.
type FitParam struct {
	Kind  FitParamKind
	Index int   // string, node or axis, as the kind says
	Nodes []int // the group of a FitMassScale
	Name  string
}

// Unit is the parameter's unit as printed ("" for a scale).
func (p FitParam) Unit() string {
	switch p.Kind {
	case FitStringRestLength, FitTrackerOffset:
		return "m"
	case FitStringStiffness:
		return "N/m"
	case FitNodeMass:
		return "kg"
	}
	return ""
}

// FitParamGroups are the names ParseFitParams accepts, each with what it
// adds.
var FitParamGroups = []struct{ Name, Adds string }{
	{"string_rest_lengths", "each string's rest length, m"},
	{"string_stiffnesses", "each string's stiffness, N/m"},
	{"masses", "one scale on every node's mass"},
	{"mass_groups", "one mass scale per node group (the node name up to its first '_' or digit: crown, rim, tentacle, ...)"},
	{"node_masses", "each node's mass, kg"},
	{"damping", "rod_damping and node_drag"},
	{"rod_damping", "one scale on every rod's damping"},
	{"node_drag", "one scale on every node's drag"},
	{"tracker_offset", "the tracker→world translation x, y, z, m"},
}

// ParseFitParams turns a comma-separated list of group names
// (FitParamGroups) into the parameters of cell c, in list order. Anchored
// nodes get no mass parameter (their mass moves nothing).
func ParseFitParams(c *Cell, list string) ([]FitParam, error) {
	var out []FitParam
	seen := map[string]bool{}
	add := func(p FitParam) {
		if !seen[p.Name] {
			seen[p.Name] = true
			out = append(out, p)
		}
	}
	nodes := c.Figure.Nodes
	freeNodes := func() []int {
		var idx []int
		for i, n := range nodes {
			if !n.Anchored {
				idx = append(idx, i)
			}
		}
		return idx
	}
	for _, raw := range strings.Split(list, ",") {
		name := strings.TrimSpace(raw)
		switch name {
		case "":
			continue
		case "string_rest_lengths":
			for i, s := range c.Strings {
				add(FitParam{Kind: FitStringRestLength, Index: i, Name: "rest_length[" + s.BarPoint + "→" + nodes[s.Node].Name + "]"})
			}
		case "string_stiffnesses":
			for i, s := range c.Strings {
				add(FitParam{Kind: FitStringStiffness, Index: i, Name: "stiffness[" + s.BarPoint + "→" + nodes[s.Node].Name + "]"})
			}
		case "masses":
			add(FitParam{Kind: FitMassScale, Nodes: freeNodes(), Name: "mass_scale"})
		case "mass_groups":
			groups := map[string][]int{}
			for _, i := range freeNodes() {
				g := nodeGroup(nodes[i].Name)
				groups[g] = append(groups[g], i)
			}
			keys := make([]string, 0, len(groups))
			for g := range groups {
				keys = append(keys, g)
			}
			sort.Strings(keys)
			for _, g := range keys {
				add(FitParam{Kind: FitMassScale, Nodes: groups[g], Name: "mass_scale[" + g + "]"})
			}
		case "node_masses":
			for _, i := range freeNodes() {
				add(FitParam{Kind: FitNodeMass, Index: i, Name: "mass[" + nodes[i].Name + "]"})
			}
		case "damping":
			add(FitParam{Kind: FitRodDampingScale, Name: "rod_damping_scale"})
			add(FitParam{Kind: FitDragScale, Name: "node_drag_scale"})
		case "rod_damping":
			add(FitParam{Kind: FitRodDampingScale, Name: "rod_damping_scale"})
		case "node_drag":
			add(FitParam{Kind: FitDragScale, Name: "node_drag_scale"})
		case "tracker_offset":
			for k, axis := range []string{"x", "y", "z"} {
				add(FitParam{Kind: FitTrackerOffset, Index: k, Name: "tracker_offset_" + axis})
			}
		default:
			names := make([]string, len(FitParamGroups))
			for i, g := range FitParamGroups {
				names[i] = g.Name
			}
			return nil, fmt.Errorf("unknown parameter group %q (known: %s)", name, strings.Join(names, ", "))
		}
	}
	if len(out) == 0 {
		return nil, fmt.Errorf("no parameters to fit in %q", list)
	}
	massOf := map[int]string{}
	for _, p := range out {
		nodes := p.Nodes
		if p.Kind == FitNodeMass {
			nodes = []int{p.Index}
		}
		for _, i := range nodes {
			if other, dup := massOf[i]; dup {
				return nil, fmt.Errorf("the mass of node %q would be fitted by both %s and %s: choose one of masses, mass_groups, node_masses", c.Figure.Nodes[i].Name, other, p.Name)
			}
			massOf[i] = p.Name
		}
	}
	return out, nil
}

// nodeGroup is a node name up to its first '_' or digit ("tentacle0_2" →
// "tentacle", "rim3" → "rim", "crown" → "crown").
func nodeGroup(name string) string {
	if i := strings.IndexFunc(name, func(r rune) bool { return r == '_' || (r >= '0' && r <= '9') }); i > 0 {
		return name[:i]
	}
	return name
}

// FitValues writes the cell's current values of ps into dst (scales are 1).
func FitValues(dst []float64, c *Cell, ps []FitParam) {
	if len(dst) != len(ps) {
		panic("sim: FitValues: wrong length")
	}
	for j, p := range ps {
		switch p.Kind {
		case FitStringRestLength:
			dst[j] = c.Strings[p.Index].RestLengthM
		case FitStringStiffness:
			dst[j] = c.Strings[p.Index].StiffnessNPerM
		case FitNodeMass:
			dst[j] = c.Figure.Nodes[p.Index].MassKg
		case FitTrackerOffset:
			dst[j] = c.TrackerToWorld.P[p.Index]
		default:
			dst[j] = 1
		}
	}
}

// WithFitValues returns a copy of cell c with the parameters ps set to
// theta: figure, strings and tracker pose changed, everything else
// (arms, markers, sources) shared with c. Scales multiply c's values.
// theta must be valid (positive masses and lengths; see FitBounds).
func WithFitValues(c *Cell, ps []FitParam, theta []float64) *Cell {
	if len(theta) != len(ps) {
		panic("sim: WithFitValues: wrong length")
	}
	out := *c
	out.Figure = c.Figure.Clone()
	out.Strings = append([]CellString(nil), c.Strings...)
	for j, p := range ps {
		v := theta[j]
		switch p.Kind {
		case FitStringRestLength:
			out.Strings[p.Index].RestLengthM = v
		case FitStringStiffness:
			out.Strings[p.Index].StiffnessNPerM = v
		case FitNodeMass:
			out.Figure.Nodes[p.Index].MassKg = v
		case FitMassScale:
			for _, i := range p.Nodes {
				out.Figure.Nodes[i].MassKg = c.Figure.Nodes[i].MassKg * v
			}
		case FitDragScale:
			for i := range out.Figure.Nodes {
				out.Figure.Nodes[i].DragNsPerM = c.Figure.Nodes[i].DragNsPerM * v
			}
		case FitRodDampingScale:
			for i := range out.Figure.Rods {
				out.Figure.Rods[i].DampingNsPerM = c.Figure.Rods[i].DampingNsPerM * v
			}
		case FitTrackerOffset:
			out.TrackerToWorld.P[p.Index] = v
		}
	}
	return &out
}

// FitBounds writes the default bounds of each parameter: lengths within
// ±50% of the nominal value, stiffnesses and masses within a factor 3
// of it, scales in [1/3, 3] (damping scales in [0, 10]), and the tracker
// offset within 0.5 m of it. They keep a fit physical (no negative mass)
// and away from models the step cannot solve; they are not a prior.
func FitBounds(lower, upper []float64, nominal []float64, ps []FitParam) {
	for j, p := range ps {
		v := nominal[j]
		switch p.Kind {
		case FitStringRestLength:
			lower[j], upper[j] = 0.5*v, 1.5*v
		case FitStringStiffness, FitNodeMass, FitMassScale:
			lower[j], upper[j] = v/3, 3*v
		case FitDragScale, FitRodDampingScale:
			lower[j], upper[j] = 0, 10
		case FitTrackerOffset:
			lower[j], upper[j] = v-0.5, v+0.5
		}
	}
}

// fitParamGrad adds ∂G/∂θ for fit parameter p into dst (band order, one
// column of a 3·free × k matrix: entry r at dst[r*k]), for a step of model
// m (built from cell) at solution x with inputs in. A scale's derivative is
// the sum of its elements' derivatives weighted by their nominal values
// (θᵢ = s·θᵢ⁰, so ∂/∂s = Σ θᵢ⁰·∂/∂θᵢ); scratch has length 3·free. The
// tracker offset moves no node: it adds nothing.
func (m *Model) fitParamGrad(dst []float64, k int, x []float64, in *stepInputs, p FitParam, nominal *Cell, scratch []float64) {
	weighted := func(q Param, w float64) {
		if w == 0 {
			return
		}
		clear(scratch)
		m.paramGrad(scratch, 1, x, in, q)
		for r, v := range scratch {
			dst[r*k] += w * v
		}
	}
	switch p.Kind {
	case FitStringRestLength:
		m.paramGrad(dst, k, x, in, Param{StringRestLength, p.Index})
	case FitStringStiffness:
		m.paramGrad(dst, k, x, in, Param{StringStiffness, p.Index})
	case FitNodeMass:
		m.paramGrad(dst, k, x, in, Param{NodeMass, p.Index})
	case FitMassScale:
		for _, i := range p.Nodes {
			weighted(Param{NodeMass, i}, nominal.Figure.Nodes[i].MassKg)
		}
	case FitDragScale:
		for i := range nominal.Figure.Nodes {
			weighted(Param{NodeDrag, i}, nominal.Figure.Nodes[i].DragNsPerM)
		}
	case FitRodDampingScale:
		for i := range nominal.Figure.Rods {
			weighted(Param{RodDamping, i}, nominal.Figure.Rods[i].DampingNsPerM)
		}
	case FitTrackerOffset:
	default:
		panic(fmt.Sprintf("sim: unknown fit parameter kind %d", int(p.Kind)))
	}
}

// FitTypical writes each parameter's typical size into dst: the nominal
// value's magnitude for lengths, stiffnesses and masses, 1 for scales, and
// 1 cm for the tracker offset (an invented but plausible calibration
// error). FitStatistics measures standard errors against it.
func FitTypical(dst, nominal []float64, ps []FitParam) {
	for j, p := range ps {
		switch p.Kind {
		case FitStringRestLength, FitStringStiffness, FitNodeMass:
			dst[j] = math.Abs(nominal[j])
		case FitTrackerOffset:
			dst[j] = 0.01
		default:
			dst[j] = 1
		}
	}
}
