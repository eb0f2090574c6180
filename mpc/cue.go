package mpc

import (
	"errors"
	"fmt"
	"math"
	"strings"

	"tautline/sim"
)

// CueJoint is one joint of the cell as the cue sees it: its name and bounds.
// The cell model supplies these; the cue file must name every one of them.
type CueJoint struct {
	Name        string  // "<arm>.<joint>", as in the cue header
	Lower       float64 // position bound, rad (m if Prismatic); −Inf allowed (continuous joint)
	Upper       float64 // position bound, rad (m if Prismatic); +Inf allowed (continuous joint)
	MaxVelocity float64 // rad/s (m/s), > 0; +Inf means unlimited
	MaxAccel    float64 // rad/s² (m/s²), > 0; +Inf means unlimited
	Prismatic   bool    // only changes the units printed in messages
}

// CueSettings controls how a cue is loaded. The zero value is not usable:
// TickS has no default, because the check depends on the cell's tick.
type CueSettings struct {
	// TickS is the cell's control period, s. Required, > 0.
	TickS float64
	// SamplesPerTick is how many spline samples the limit check takes per
	// tick period. 0 means 4, the least issue 4 allows; values 1 to 3 are
	// refused.
	SamplesPerTick int
}

// DefaultSamplesPerTick is what a zero CueSettings.SamplesPerTick means.
const DefaultSamplesPerTick = 4

// maxCueSamples bounds the limit check's work: a cue that would need more
// samples than this (an hour at 1 kHz × 4 is 14.4 million) is refused rather
// than stalling the loader.
const maxCueSamples = 50_000_000

// Cue is a loaded, checked cue: every joint of the cell as a C² cubic spline
// of cue time through the rows of the cue file.
//
// # End conditions
//
// The spline is clamped with zero velocity at the first and last row: the
// figure hangs at rest before the cue starts and must come to rest after it
// ends, and the arms hold the first and last pose outside the cue. A natural
// spline (zero second derivative at the ends) would instead leave the joints
// moving at the first and last row, so playback would begin and end with a
// velocity step, which no acceleration limit allows. The price of clamping
// is that the acceleration at the first and last row is generally not zero,
// an acceleration step from rest; the limit check includes those values, so
// the step is always within the joint's acceleration limit.
//
// # Rows
//
// Two rows give one cubic segment: the rest-to-rest "smoothstep" motion
// between two poses. Three or more rows give the C² spline through all of
// them. A clamped spline can overshoot its rows between them; the limit
// check samples the spline, not the rows, so overshoot beyond a bound is
// refused.
//
// A Cue is immutable after loading and safe for concurrent use; evaluation
// allocates nothing.
type Cue struct {
	file   string
	names  []string // in the cell's joint order
	spline *cubicSpline
	peaks  []JointPeak
}

// ParseCue reads a cue file for a cell with the given joints (in the cell's
// order), fits the spline and checks it against every joint's position,
// velocity and acceleration limit. file is only used in messages.
//
// # File format (tautline.cue/1)
//
// UTF-8 CSV text; a byte-order mark and CRLF line ends are accepted. Blank
// lines and lines starting with '#' are ignored; a comment
// "# tautline.cue/1" before the header declares the version (optional; any
// other "# tautline.…" declaration there is refused). The first other line
// is the header: time_s, then one column per joint named "<arm>.<joint>",
// every joint of the cell exactly once, in any order. Each following line is
// a row: the cue time in seconds, then each joint's position in rad (m for a
// prismatic joint). Times strictly increase; at least 2 rows; every value a
// finite decimal number. Spaces around fields are ignored; there is no
// quoting. For example (invented):
//
//	# tautline.cue/1
//	time_s,left.shoulder,left.elbow,right.shoulder,right.elbow
//	0.0,   0.00,         1.20,       0.00,          1.20
//	1.5,   0.35,         0.90,      -0.35,          0.90
//	3.0,   0.00,         1.20,       0.00,          1.20
//
// # Errors
//
// Problems in the file are returned as sim.FileErrors, in file order, each
// naming the file, the line, the character column and the CSV column by
// number and header name ("cue.csv:14:9: left.j2 (column 3): …"); a missing
// column is reported on the header line. A limit violation is reported once,
// for the earliest sample beyond a limit (position first, then velocity,
// then acceleration, joints in cell order), on the last row at or before
// that time; the reported time is at most one sample step
// (TickS/SamplesPerTick) after the spline crosses the limit. Invalid joints
// or settings, which are the caller's mistake and not the file's, are plain
// errors.
func ParseCue(file string, data []byte, joints []CueJoint, s CueSettings) (*Cue, error) {
	samplesPerTick, err := validateCueInputs(joints, s)
	if err != nil {
		return nil, err
	}
	var order []int
	tt, err := parseTimeTable(file, data, "cue", func(tt *timeTable, el *errorList) { order = mapCueColumns(tt, joints, el) })
	if err != nil {
		return nil, err
	}
	if err := tt.atLeastTwoRows(file, "the cue", " (two rows give one rest-to-rest motion)"); err != nil {
		return nil, err
	}

	nj := len(joints)
	knots, values := tt.knotsAndValues(order)
	sp, err := fitClampedSpline(knots, values, nj, nil, nil)
	if err != nil {
		return nil, sim.FileErrors{{File: file, Line: tt.rows[0].line, Msg: err.Error()}}
	}
	c := &Cue{file: file, spline: sp, names: make([]string, nj)}
	for j, jt := range joints {
		c.names[j] = jt.Name
	}
	peaks, err := checkCueLimits(tt, order, sp, joints, s.TickS/float64(samplesPerTick))
	if err != nil {
		return nil, err
	}
	c.peaks = peaks
	return c, nil
}

func validateCueInputs(joints []CueJoint, s CueSettings) (samplesPerTick int, err error) {
	if !(s.TickS > 0) || math.IsInf(s.TickS, 0) {
		return 0, fmt.Errorf("mpc: CueSettings.TickS must be a positive finite period in seconds, got %v", s.TickS)
	}
	samplesPerTick = s.SamplesPerTick
	switch {
	case samplesPerTick == 0:
		samplesPerTick = DefaultSamplesPerTick
	case samplesPerTick < DefaultSamplesPerTick:
		return 0, fmt.Errorf("mpc: CueSettings.SamplesPerTick must be 0 (meaning %d) or at least %d, got %d", DefaultSamplesPerTick, DefaultSamplesPerTick, samplesPerTick)
	}
	if len(joints) == 0 {
		return 0, errors.New("mpc: a cue needs at least one joint")
	}
	seen := make(map[string]bool, len(joints))
	for _, j := range joints {
		switch {
		case j.Name == "" || j.Name == "time_s" || strings.ContainsAny(j.Name, ",\r\n") || strings.TrimSpace(j.Name) != j.Name:
			return 0, fmt.Errorf("mpc: cue joint name %q cannot be a CSV column name", j.Name)
		case seen[j.Name]:
			return 0, fmt.Errorf("mpc: cue joint %q is listed twice", j.Name)
		case math.IsNaN(j.Lower) || math.IsNaN(j.Upper) || !(j.Lower <= j.Upper) || math.IsInf(j.Lower, 1) || math.IsInf(j.Upper, -1):
			return 0, fmt.Errorf("mpc: cue joint %q: position bounds [%v, %v] are not an interval", j.Name, j.Lower, j.Upper)
		case !(j.MaxVelocity > 0):
			return 0, fmt.Errorf("mpc: cue joint %q: velocity limit %v must be positive", j.Name, j.MaxVelocity)
		case !(j.MaxAccel > 0):
			return 0, fmt.Errorf("mpc: cue joint %q: acceleration limit %v must be positive", j.Name, j.MaxAccel)
		}
		seen[j.Name] = true
	}
	return samplesPerTick, nil
}

// mapCueColumns returns, for each joint in cell order, the index of its CSV
// column. Unknown, duplicate and missing columns are all reported to el.
func mapCueColumns(tt *timeTable, joints []CueJoint, el *errorList) []int {
	index := make(map[string]int, len(joints))
	for j, jt := range joints {
		index[jt.Name] = j
	}
	order := make([]int, len(joints))
	for j := range order {
		order[j] = -1
	}
	cols := tt.headerCols
	for i := 1; i < len(tt.columns); i++ {
		name := tt.columns[i]
		j, ok := index[name]
		switch {
		case !ok:
			el.add(tt.headerLine, cols[i], fieldName(name, i+1), "%q is not a joint of the cell; its joints are %s", name, listNames(joints))
		case order[j] >= 0:
			el.add(tt.headerLine, cols[i], fieldName(name, i+1), "joint %s appears again; it is already column %d (every joint exactly once)", name, order[j]+1)
		default:
			order[j] = i
		}
	}
	for j, jt := range joints {
		if order[j] < 0 {
			el.add(tt.headerLine, 0, jt.Name, "the header has no column for joint %s; every joint of the cell must appear exactly once", jt.Name)
		}
	}
	return order
}

func listNames(joints []CueJoint) string {
	names := make([]string, len(joints))
	for i, j := range joints {
		names[i] = j.Name
	}
	return strings.Join(names, ", ")
}

// File returns the cue file's name as given to ParseCue.
func (c *Cue) File() string { return c.file }

// StartS returns the cue time of the first row, s.
func (c *Cue) StartS() float64 { return c.spline.startS() }

// EndS returns the cue time of the last row, s.
func (c *Cue) EndS() float64 { return c.spline.endS() }

// DurationS returns EndS − StartS, s.
func (c *Cue) DurationS() float64 { return c.spline.endS() - c.spline.startS() }

// JointNames returns the joints in the cell's order, the order of every
// destination slice. The caller must not modify it.
func (c *Cue) JointNames() []string { return c.names }

// PositionTo writes every joint's nominal position at cue time t into dst
// (len(dst) must equal the number of joints; it panics otherwise, and on a
// NaN t). Before the start it holds the first row's pose, after the end the
// last row's.
func (c *Cue) PositionTo(dst []float64, t float64) { c.spline.positionTo(dst, t) }

// VelocityTo writes every joint's nominal velocity at t into dst; zero
// outside [StartS, EndS], and zero at both ends by the clamped end
// conditions.
func (c *Cue) VelocityTo(dst []float64, t float64) { c.spline.velocityTo(dst, t) }

// AccelTo writes every joint's nominal acceleration at t into dst; zero
// outside [StartS, EndS]; at StartS and EndS the one-sided value from inside
// the cue.
func (c *Cue) AccelTo(dst []float64, t float64) { c.spline.accelTo(dst, t) }

// Peaks returns, per joint in cell order, the extreme values found by the
// limit check. The caller must not modify it.
func (c *Cue) Peaks() []JointPeak { return c.peaks }
