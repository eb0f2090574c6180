package sim

import (
	"fmt"
	"math"
	"math/rand/v2"
)

// MismatchFormat is the format string of a mismatch profile file.
const MismatchFormat = "tautline.mismatch/1"

// MismatchProfile describes how a simulated plant differs from the cell's
// model, and what its tracker and servos do, so that rehearsals face the
// drift a real figure shows. It is read from a JSON file
// ("format": "tautline.mismatch/1"); every field is optional and zero means
// "no such effect".
//
// Random draws (which strings get longer, which markers are hidden on a
// tick, the noise) come from a generator seeded with Seed, so a profile
// gives the same plant and the same observations every run.
type MismatchProfile struct {
	Format  string `json:"format"`
	Comment string `json:"comment"`
	Seed    uint64 `json:"seed"`

	// StringRestLengthSpread changes each string's rest length by a factor
	// 1 ± u, u drawn uniformly in [spread/2, spread] with a random sign
	// (so every string is off by at least half the spread).
	StringRestLengthSpread float64 `json:"string_rest_length_spread"`
	// MassSpread changes each node's mass the same way.
	MassSpread float64 `json:"mass_spread"`
	// ExtraDragNsPerM is added to every node's drag, N·s/m.
	ExtraDragNsPerM float64 `json:"extra_drag_ns_per_m"`
	// ExtraRodDampingNsPerM is added to every rod's axial damping, N·s/m.
	ExtraRodDampingNsPerM float64 `json:"extra_rod_damping_ns_per_m"`

	// Pushes are sudden velocity changes (a bump, a gust) at given times.
	Pushes []Push `json:"pushes"`

	// MarkerNoiseM is the standard deviation of each marker coordinate's
	// Gaussian noise, m.
	MarkerNoiseM float64 `json:"marker_noise_m"`
	// OcclusionProbability is the chance that a marker is hidden on a tick,
	// drawn independently per marker and tick.
	OcclusionProbability float64 `json:"occlusion_probability"`
	// LatencyS is how old an observation is when it is sent: the markers
	// and joints it reports were captured LatencyS before. Rounded to whole
	// ticks.
	LatencyS float64 `json:"latency_s"`
	// ServoTimeConstantS is the first-order lag of the joint servos: each
	// tick a joint moves 1 − exp(−tick/τ) of the way to its command.
	ServoTimeConstantS float64 `json:"servo_time_constant_s"`
}

// Push changes the velocity of one node (or of every free node when Node
// is empty) by VelocityMPerS at cue time AtS.
type Push struct {
	AtS           float64    `json:"at_s"`
	Node          string     `json:"node"`
	VelocityMPerS [3]float64 `json:"velocity_m_per_s"`
}

// ParseMismatch reads a mismatch profile. Errors name the file, line:column
// and field.
func ParseMismatch(file string, data []byte) (*MismatchProfile, error) {
	d, err := newJSONDoc(file, data)
	if err != nil {
		return nil, err
	}
	var p MismatchProfile
	if err := d.decodeStrict(&p); err != nil {
		return nil, err
	}
	var errs FileErrors
	bad := func(field, format string, args ...any) { errs = append(errs, d.errf(field, format, args...)) }
	if p.Format != MismatchFormat {
		bad("format", "is %q, want %q", p.Format, MismatchFormat)
	}
	fraction := func(field string, v float64) {
		if !(v >= 0 && v < 1) {
			bad(field, "must be a fraction in [0, 1), got %v", v)
		}
	}
	fraction("string_rest_length_spread", p.StringRestLengthSpread)
	fraction("mass_spread", p.MassSpread)
	fraction("occlusion_probability", p.OcclusionProbability)
	nonNeg := func(field string, v float64) {
		if !(v >= 0) || math.IsInf(v, 0) {
			bad(field, "must be a finite number ≥ 0, got %v", v)
		}
	}
	nonNeg("extra_drag_ns_per_m", p.ExtraDragNsPerM)
	nonNeg("extra_rod_damping_ns_per_m", p.ExtraRodDampingNsPerM)
	nonNeg("marker_noise_m", p.MarkerNoiseM)
	nonNeg("latency_s", p.LatencyS)
	nonNeg("servo_time_constant_s", p.ServoTimeConstantS)
	for i, pu := range p.Pushes {
		at := fmt.Sprintf("pushes[%d]", i)
		if !cellFinite(pu.AtS) {
			bad(at+".at_s", "must be finite")
		}
		for _, v := range pu.VelocityMPerS {
			if !cellFinite(v) {
				bad(at+".velocity_m_per_s", "must be finite")
			}
		}
	}
	if len(errs) > 0 {
		return nil, errs
	}
	return &p, nil
}

// ApplyMismatch returns the figure and strings of cell changed as the
// profile says (rest lengths, masses, damping), drawing from rng. The cell
// is not modified.
func ApplyMismatch(cell *Cell, p *MismatchProfile, rng *rand.Rand) (*Figure, []StringLink) {
	off := func(spread float64) float64 {
		if spread == 0 {
			return 1
		}
		u := spread * (0.5 + 0.5*rng.Float64())
		if rng.IntN(2) == 0 {
			u = -u
		}
		return 1 + u
	}
	fig := cell.Figure.Clone()
	strs := cell.StringLinks()
	for i := range strs {
		strs[i].RestLengthM *= off(p.StringRestLengthSpread)
	}
	for i := range fig.Nodes {
		fig.Nodes[i].MassKg *= off(p.MassSpread)
		fig.Nodes[i].DragNsPerM += p.ExtraDragNsPerM
	}
	for i := range fig.Rods {
		fig.Rods[i].DampingNsPerM += p.ExtraRodDampingNsPerM
	}
	return fig, strs
}
