package mpc

import (
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"

	"gonum.org/v1/gonum/interp"

	"tautline/sim"
)

// testJoints is the invented cell every cue in testdata/cues is written for.
func testJoints() []CueJoint {
	return []CueJoint{
		{Name: "left.j1", Lower: -3, Upper: 3, MaxVelocity: 2, MaxAccel: 6},
		{Name: "left.j2", Lower: -3, Upper: 3, MaxVelocity: 2, MaxAccel: 6},
		{Name: "right.j1", Lower: -1, Upper: 1, MaxVelocity: 1, MaxAccel: 4},
	}
}

const testTickS = 0.004 // 250 Hz, a common streaming rate (common practice)

func readCue(t *testing.T, name string) []byte {
	t.Helper()
	data, err := os.ReadFile(filepath.Join("testdata", "cues", name))
	if err != nil {
		t.Fatal(err)
	}
	return data
}

func loadCue(t *testing.T, name string, joints []CueJoint, s CueSettings) *Cue {
	t.Helper()
	c, err := ParseCue(name, readCue(t, name), joints, s)
	if err != nil {
		t.Fatalf("ParseCue(%s): %v", name, err)
	}
	return c
}

// The valid cue lists its columns as right.j1, left.j1, left.j2; the Cue
// reports the cell's order, passes through every row exactly and is at rest
// at both ends (the clamped end conditions).
func TestParseCueValid(t *testing.T) {
	c := loadCue(t, "valid.csv", testJoints(), CueSettings{TickS: testTickS})
	if got, want := strings.Join(c.JointNames(), ","), "left.j1,left.j2,right.j1"; got != want {
		t.Fatalf("JointNames = %s, want %s", got, want)
	}
	if c.StartS() != 0 || c.EndS() != 4 || c.DurationS() != 4 || c.File() != "valid.csv" {
		t.Errorf("start %g end %g duration %g file %q, want 0, 4, 4, valid.csv", c.StartS(), c.EndS(), c.DurationS(), c.File())
	}
	// The rows of valid.csv, rearranged by hand into the cell's order.
	rows := []struct {
		t float64
		q []float64
	}{
		{0, []float64{0, 0, 0.10}},
		{1, []float64{0.30, -0.20, 0.20}},
		{2, []float64{0.50, -0.40, 0.25}},
		{3, []float64{0.40, -0.30, 0.20}},
		{4, []float64{0.20, 0, 0.10}},
	}
	q := make([]float64, 3)
	for _, r := range rows {
		c.PositionTo(q, r.t)
		for j := range q {
			if q[j] != r.q[j] { // a knot is evaluated at offset 0: exact
				t.Errorf("t=%g %s: %g, want the row's %g", r.t, c.JointNames()[j], q[j], r.q[j])
			}
		}
	}
	v := make([]float64, 3)
	for _, at := range []float64{c.StartS(), c.EndS()} {
		c.VelocityTo(v, at)
		for j := range v {
			// Zero by the end condition; 1e-12 covers the rounding of the
			// one-sided sum at the last row.
			if math.Abs(v[j]) > 1e-12 {
				t.Errorf("t=%g %s: velocity %g, want 0 (clamped end)", at, c.JointNames()[j], v[j])
			}
		}
	}
}

// Against the reference library: each joint of the loaded cue is gonum's
// interp.ClampedCubic (zero end slopes) through that joint's rows.
func TestCueMatchesGonumClampedCubic(t *testing.T) {
	c := loadCue(t, "valid.csv", testJoints(), CueSettings{TickS: testTickS})
	times := []float64{0, 1, 2, 3, 4}
	byJoint := [][]float64{{0, 0.30, 0.50, 0.40, 0.20}, {0, -0.20, -0.40, -0.30, 0}, {0.10, 0.20, 0.25, 0.20, 0.10}} // valid.csv
	q, v := make([]float64, 3), make([]float64, 3)
	for j, ys := range byJoint {
		var ref interp.ClampedCubic
		if err := ref.Fit(times, ys); err != nil {
			t.Fatal(err)
		}
		for k := 0; k <= 400; k++ {
			at := 4 * float64(k) / 400
			c.PositionTo(q, at)
			c.VelocityTo(v, at)
			// 1e-12 relative to order-1 values: same spline, two solvers.
			if !closeTo(q[j], ref.Predict(at), 1e-12) || !closeTo(v[j], ref.PredictDerivative(at), 1e-12) {
				t.Fatalf("%s t=%g: (%g, %g), gonum (%g, %g)", c.JointNames()[j], at, q[j], v[j], ref.Predict(at), ref.PredictDerivative(at))
			}
		}
	}
}

// Two rows give one clamped cubic: the rest-to-rest Hermite cubic
// q0 + Δq·(3s² − 2s³), s = (t − t0)/T (the cubic with zero end slopes through
// both values; a cubic spline reproduces it exactly, de Boor chapter IV).
// Its speed peaks at s = ½ with 1.5·|Δq|/T and its acceleration at the ends
// with 6·|Δq|/T² (differentiate twice). Peaks must report exactly these.
func TestCueTwoRowsIsRestToRestCubic(t *testing.T) {
	const t0, T = 0.5, 2.0
	q0 := []float64{0.1, -0.2, 0.3}
	dq := []float64{1.2, 0.8, -0.5}
	csv := fmt.Sprintf("time_s,right.j1,left.j2,left.j1\n%g,%g,%g,%g\n%g,%g,%g,%g\n",
		t0, q0[2], q0[1], q0[0], t0+T, q0[2]+dq[2], q0[1]+dq[1], q0[0]+dq[0])
	joints := testJoints()
	c, err := ParseCue("two.csv", []byte(csv), joints, CueSettings{TickS: testTickS})
	if err != nil {
		t.Fatal(err)
	}
	q, v, a := make([]float64, 3), make([]float64, 3), make([]float64, 3)
	for k := 0; k <= 100; k++ {
		s := float64(k) / 100
		at := t0 + s*T
		c.PositionTo(q, at)
		c.VelocityTo(v, at)
		c.AccelTo(a, at)
		for j := range q {
			wq := q0[j] + dq[j]*(3*s*s-2*s*s*s)
			wv := dq[j] * (6*s - 6*s*s) / T
			wa := dq[j] * (6 - 12*s) / (T * T)
			// 1e-12: rounding only, values of order 1.
			if !closeTo(q[j], wq, 1e-12) || !closeTo(v[j], wv, 1e-12) || !closeTo(a[j], wa, 1e-12) {
				t.Fatalf("%s s=%g: (%g, %g, %g), want (%g, %g, %g)", joints[j].Name, s, q[j], v[j], a[j], wq, wv, wa)
			}
		}
	}
	for j, p := range c.Peaks() {
		jt := joints[j]
		wantSpeed, wantAccel := 1.5*math.Abs(dq[j])/T, 6*math.Abs(dq[j])/(T*T)
		if p.Name != jt.Name {
			t.Errorf("peak %d is %s, want %s", j, p.Name, jt.Name)
		}
		if !closeTo(p.PeakSpeed, wantSpeed, 1e-12) || !closeTo(p.PeakSpeedAtS, t0+T/2, 1e-12) || !closeTo(p.PeakSpeedOfLimit, wantSpeed/jt.MaxVelocity, 1e-12) {
			t.Errorf("%s: speed peak %g at %g (%.4g of limit), want %g at %g (%.4g)", jt.Name, p.PeakSpeed, p.PeakSpeedAtS, p.PeakSpeedOfLimit, wantSpeed, t0+T/2, wantSpeed/jt.MaxVelocity)
		}
		if !closeTo(p.PeakAccel, wantAccel, 1e-12) || p.PeakAccelAtS != t0 || !closeTo(p.PeakAccelOfLimit, wantAccel/jt.MaxAccel, 1e-12) {
			t.Errorf("%s: accel peak %g at %g (%.4g of limit), want %g at %g (%.4g)", jt.Name, p.PeakAccel, p.PeakAccelAtS, p.PeakAccelOfLimit, wantAccel, t0, wantAccel/jt.MaxAccel)
		}
		lo, hi := math.Min(q0[j], q0[j]+dq[j]), math.Max(q0[j], q0[j]+dq[j])
		if p.MinPosition != lo || p.MaxPosition != hi {
			t.Errorf("%s: position range [%g, %g], want [%g, %g] (the cubic is monotone)", jt.Name, p.MinPosition, p.MaxPosition, lo, hi)
		}
	}
}

// The peaks do not depend on the sampling grid: the check also samples each
// segment's velocity vertex and velocity zeros, where speed and position
// peak. Here the grid (0.1 s tick, 4 samples per tick) misses the speed
// peak of a two-row cue at t0 + T/2 by 0.000 15 s, which would lower the
// grid's maximum by about 1e-7 relative; the reported peak must still be
// the analytic 1.5·|Δq|/T (see the previous test) to rounding, 1e-12.
func TestCuePeaksAreExactBetweenSamples(t *testing.T) {
	const T, dq = 1.0003, 0.9
	csv := fmt.Sprintf("time_s,left.j1,left.j2,right.j1\n0,0,0,0\n%g,%g,0,0\n", T, dq)
	c, err := ParseCue("offgrid.csv", []byte(csv), testJoints(), CueSettings{TickS: 0.1})
	if err != nil {
		t.Fatal(err)
	}
	p := c.Peaks()[0]
	if want := 1.5 * dq / T; !closeTo(p.PeakSpeed, want, 1e-12) || !closeTo(p.PeakSpeedAtS, T/2, 1e-12) {
		t.Errorf("speed peak %.15g at %.15g, want %.15g at %.15g", p.PeakSpeed, p.PeakSpeedAtS, want, T/2)
	}

	// A position that turns between rows, off the grid: the reported maximum
	// must match a brute-force scan (1e-4 s spacing, then 1e-7 s around the
	// best point; the scan's own shortfall is at most |a|·(1e-7)²/2 < 1e-13
	// here); grid-only sampling would be short by about 2e-6.
	csv = "time_s,left.j1,left.j2,right.j1\n0,0,0,0\n1.0003,1,0,0\n2.5,0.2,0,0\n"
	c, err = ParseCue("turn.csv", []byte(csv), testJoints(), CueSettings{TickS: 0.1})
	if err != nil {
		t.Fatal(err)
	}
	q := make([]float64, 3)
	scanMax, best := math.Inf(-1), 0.0
	for at := 0.0; at <= 2.5; at += 1e-4 {
		if c.PositionTo(q, at); q[0] > scanMax {
			scanMax, best = q[0], at
		}
	}
	for at := best - 1e-4; at <= best+1e-4; at += 1e-7 {
		c.PositionTo(q, at)
		scanMax = math.Max(scanMax, q[0])
	}
	if got := c.Peaks()[0].MaxPosition; math.Abs(got-scanMax) > 1e-10 {
		t.Errorf("max position %.15g, brute-force scan %.15g", got, scanMax)
	}
}

// Three rows: the spline passes through the middle one, is at rest at both
// ends, and its velocity is continuous at the middle row.
func TestCueThreeRows(t *testing.T) {
	csv := "time_s,left.j1,left.j2,right.j1\n0,0,0,0\n1,0.4,-0.2,0.1\n3,0.1,0.1,0.3\n"
	c, err := ParseCue("three.csv", []byte(csv), testJoints(), CueSettings{TickS: testTickS})
	if err != nil {
		t.Fatal(err)
	}
	q, v := make([]float64, 3), make([]float64, 3)
	c.PositionTo(q, 1)
	if q[0] != 0.4 || q[1] != -0.2 || q[2] != 0.1 {
		t.Errorf("middle row %v, want [0.4 -0.2 0.1]", q)
	}
	vl, vr := make([]float64, 3), make([]float64, 3)
	c.VelocityTo(vl, 1-1e-9)
	c.VelocityTo(vr, 1)
	for j := range vl {
		// The velocity changes by at most |a|·1e-9 s across the step; 1e-7
		// is a generous bound on that plus rounding.
		if math.Abs(vl[j]-vr[j]) > 1e-7 {
			t.Errorf("joint %d: velocity jumps at the middle row: %g → %g", j, vl[j], vr[j])
		}
	}
	for _, at := range []float64{0, 3} {
		c.VelocityTo(v, at)
		for j := range v {
			if math.Abs(v[j]) > 1e-12 {
				t.Errorf("t=%g joint %d: velocity %g, want 0", at, j, v[j])
			}
		}
	}
}

// Outside the cue the first and last pose are held at rest.
func TestCueHoldsOutside(t *testing.T) {
	c := loadCue(t, "valid.csv", testJoints(), CueSettings{TickS: testTickS})
	q, v, a := make([]float64, 3), make([]float64, 3), make([]float64, 3)
	for _, at := range []float64{-1, 4.5, 1e9} {
		want := []float64{0, 0, 0.10} // first row of valid.csv in cell order
		if at > 4 {
			want = []float64{0.20, 0, 0.10} // last row
		}
		c.PositionTo(q, at)
		c.VelocityTo(v, at)
		c.AccelTo(a, at)
		for j := range q {
			if q[j] != want[j] || v[j] != 0 || a[j] != 0 {
				t.Errorf("t=%g joint %d: (%g, %g, %g), want (%g, 0, 0)", at, j, q[j], v[j], a[j], want[j])
			}
		}
	}
}

func TestCueEvaluationPanicsOnMisuse(t *testing.T) {
	c := loadCue(t, "valid.csv", testJoints(), CueSettings{TickS: testTickS})
	for name, f := range map[string]func(){
		"short dst": func() { c.PositionTo(make([]float64, 2), 1) },
		"long dst":  func() { c.VelocityTo(make([]float64, 4), 1) },
		"NaN time":  func() { c.AccelTo(make([]float64, 3), math.NaN()) },
	} {
		func() {
			defer func() {
				if recover() == nil {
					t.Errorf("%s: no panic", name)
				}
			}()
			f()
		}()
	}
}

// firstFileError returns the first *sim.FileError in err and how many the
// error holds.
func firstFileError(t *testing.T, err error) (*sim.FileError, int) {
	t.Helper()
	if err == nil {
		t.Fatal("no error")
	}
	var fe *sim.FileError
	if !errors.As(err, &fe) {
		t.Fatalf("error %T %q is not a *sim.FileError", err, err)
	}
	n := 1
	var fes sim.FileErrors
	if errors.As(err, &fes) {
		n = len(fes)
	}
	return fe, n
}

// Every malformed class names the file, the line, the character column
// (0 where the problem is a whole line or a column that is absent) and the
// CSV column by number and header name. Expected positions were counted by
// hand from the files in testdata/cues.
func TestParseCueMalformed(t *testing.T) {
	for _, c := range []struct {
		file      string
		line, col int
		field     string
		msg       string
	}{
		{"missing_column.csv", 2, 0, "right.j1", "no column for joint right.j1"},
		{"duplicate_column.csv", 1, 33, "left.j1 (column 5)", "already column 2"},
		{"unknown_joint.csv", 1, 33, "left.j9 (column 5)", `"left.j9" is not a joint of the cell`},
		{"time_not_increasing.csv", 4, 1, "time_s (column 1)", "time 1 s is not after 1 s on line 3"},
		{"time_decreasing.csv", 4, 1, "time_s (column 1)", "time 1.5 s is not after 2 s on line 3"},
		{"non_numeric.csv", 3, 7, "left.j2 (column 3)", `"0.3x" is not a number`},
		{"too_few_rows.csv", 3, 0, "", "has 1 row(s); it needs at least 2"},
		{"no_rows.csv", 1, 0, "", "has 0 row(s); it needs at least 2"},
		{"nan.csv", 3, 3, "left.j1 (column 2)", `"NaN" is not finite`},
		{"inf.csv", 3, 11, "right.j1 (column 4)", `"-Inf" is not finite`},
		{"overflow.csv", 3, 1, "time_s (column 1)", `"1e999" is out of range`},
		{"wrong_field_count.csv", 3, 0, "", "row has 3 fields, the header (line 1) has 4"},
		{"first_column.csv", 1, 1, "t (column 1)", "the first column must be time_s"},
		{"version.csv", 1, 0, "", `unsupported format version "tautline.cue/2"`},
	} {
		t.Run(c.file, func(t *testing.T) {
			_, err := ParseCue(c.file, readCue(t, c.file), testJoints(), CueSettings{TickS: testTickS})
			fe, n := firstFileError(t, err)
			if n != 1 {
				t.Errorf("%d errors, want 1: %v", n, err)
			}
			if fe.File != c.file || fe.Line != c.line || fe.Col != c.col || fe.Field != c.field || !strings.Contains(fe.Msg, c.msg) {
				t.Errorf("got %s:%d:%d field %q msg %q; want %s:%d:%d field %q msg containing %q",
					fe.File, fe.Line, fe.Col, fe.Field, fe.Msg, c.file, c.line, c.col, c.field, c.msg)
			}
			prefix := fmt.Sprintf("%s:%d", c.file, c.line)
			if !strings.HasPrefix(err.Error(), prefix) {
				t.Errorf("message %q does not start with %q", err.Error(), prefix)
			}
		})
	}
}

// A header can be wrong in several ways at once; each is reported, and so
// are the rows' problems, in file order.
func TestParseCueReportsEveryProblem(t *testing.T) {
	csv := "time_s,left.j2,left.j2,right.j9\n0,0,0,0\n1,0,x,0\n"
	_, err := ParseCue("many.csv", []byte(csv), testJoints(), CueSettings{TickS: testTickS})
	var fes sim.FileErrors
	if !errors.As(err, &fes) {
		t.Fatalf("error %v is not sim.FileErrors", err)
	}
	want := []string{
		"many.csv:1:16: left.j2 (column 3): joint left.j2 appears again",
		`many.csv:1:24: right.j9 (column 4): "right.j9" is not a joint`,
		"many.csv:1: left.j1: the header has no column for joint left.j1",
		"many.csv:1: right.j1: the header has no column for joint right.j1",
		`many.csv:3:5: left.j2 (column 3): "x" is not a number`,
	}
	if len(fes) != len(want) {
		t.Fatalf("%d errors, want %d:\n%v", len(fes), len(want), err)
	}
	for i, w := range want {
		if !strings.HasPrefix(fes[i].Error(), w) {
			t.Errorf("error %d: %q, want prefix %q", i, fes[i].Error(), w)
		}
	}
}

// Past maxFileErrors problems the list ends with a note instead of growing.
func TestParseCueCapsTheErrorList(t *testing.T) {
	var b strings.Builder
	b.WriteString("time_s,left.j1,left.j2,right.j1\n")
	for i := 0; i < 2*maxFileErrors; i++ {
		fmt.Fprintf(&b, "%d,x,0,0\n", i)
	}
	_, err := ParseCue("bad.csv", []byte(b.String()), testJoints(), CueSettings{TickS: testTickS})
	var fes sim.FileErrors
	if !errors.As(err, &fes) || len(fes) != maxFileErrors+1 {
		t.Fatalf("want %d errors, got %v", maxFileErrors+1, err)
	}
	if last := fes[maxFileErrors]; !strings.Contains(last.Msg, "too many problems") || last.Line != maxFileErrors+2 {
		t.Errorf("last entry %q, want the stop note on line %d", last.Error(), maxFileErrors+2)
	}
}

// A byte-order mark, CRLF line ends, blank lines, comments and spaces around
// fields are accepted; positions still count as an editor shows them.
func TestParseCueToleratesBOMCRLFAndSpaces(t *testing.T) {
	csv := "\xef\xbb\xbf# tautline.cue/1\r\ntime_s , left.j2, right.j1 ,left.j1\r\n\r\n0, 0, 0, 0\r\n2, 0.5 , 0.2, -0.1\r\n"
	c, err := ParseCue("crlf.csv", []byte(csv), testJoints(), CueSettings{TickS: testTickS})
	if err != nil {
		t.Fatal(err)
	}
	q := make([]float64, 3)
	c.PositionTo(q, 2)
	if q[0] != -0.1 || q[1] != 0.5 || q[2] != 0.2 {
		t.Errorf("last row %v, want [-0.1 0.5 0.2]", q)
	}
	bad := "\xef\xbb\xbftime_s,left.j1,left.j2,right.j1\r\n0,0,0,0\r\n1,0, oops,0\r\n"
	_, err = ParseCue("bad.csv", []byte(bad), testJoints(), CueSettings{TickS: testTickS})
	fe, _ := firstFileError(t, err)
	if fe.Line != 3 || fe.Col != 6 || fe.Field != "left.j2 (column 3)" {
		t.Errorf("got %v, want bad.csv:3:6: left.j2 (column 3)", fe)
	}
}

var atTime = regexp.MustCompile(` at t=(\S+) s `)

// A limit broken only between rows is found, on the right line, column and
// joint, at the earliest sample: the reported time t has the spline beyond
// the limit, and the spline is within the limit everywhere before the
// previous sample (checked on a grid 100× finer). The expected spline values
// come from the same file loaded with that one limit lifted.
func TestParseCueRefusesLimitBreaks(t *testing.T) {
	for _, c := range []struct {
		file  string
		joint int
		kind  string // position (upper), velocity, acceleration
		line  int
		col   int
		// onlyBetweenRows: the file's rows alone (values, row-to-row
		// speeds and the spline at the rows) are within the limit.
		onlyBetweenRows bool
	}{
		{"velocity_between_knots.csv", 0, "velocity", 7, 3, true},
		{"position_overshoot.csv", 2, "position", 7, 7, true},
		{"accel_spike.csv", 1, "acceleration", 7, 5, false},
	} {
		for _, samplesPerTick := range []int{0, 40} {
			t.Run(fmt.Sprintf("%s/%d", c.file, samplesPerTick), func(t *testing.T) {
				joints := testJoints()
				s := CueSettings{TickS: testTickS, SamplesPerTick: samplesPerTick}
				step := testTickS / DefaultSamplesPerTick
				if samplesPerTick > 0 {
					step = testTickS / float64(samplesPerTick)
				}
				_, err := ParseCue(c.file, readCue(t, c.file), joints, s)
				fe, _ := firstFileError(t, err)
				name := joints[c.joint].Name
				wantField := fmt.Sprintf("%s (column %d)", name, c.joint+2)
				if fe.Line != c.line || fe.Col != c.col || fe.Field != wantField || !strings.HasPrefix(fe.Msg, c.kind+" ") {
					t.Fatalf("got %v; want %s:%d:%d: %s: %s …", fe, c.file, c.line, c.col, wantField, c.kind)
				}
				m := atTime.FindStringSubmatch(fe.Msg)
				if m == nil {
					t.Fatalf("no time in %q", fe.Msg)
				}
				tBreak, err := strconv.ParseFloat(m[1], 64)
				if err != nil {
					t.Fatal(err)
				}

				loose := testJoints()
				limit := 0.0
				switch c.kind {
				case "position":
					limit, loose[c.joint].Upper = loose[c.joint].Upper, math.Inf(1)
				case "velocity":
					limit, loose[c.joint].MaxVelocity = loose[c.joint].MaxVelocity, math.Inf(1)
				case "acceleration":
					limit, loose[c.joint].MaxAccel = loose[c.joint].MaxAccel, math.Inf(1)
				}
				cue := loadCue(t, c.file, loose, s)
				buf := make([]float64, len(joints))
				value := func(at float64) float64 {
					switch c.kind {
					case "position":
						cue.PositionTo(buf, at)
						return buf[c.joint]
					case "velocity":
						cue.VelocityTo(buf, at)
					default:
						cue.AccelTo(buf, at)
					}
					return math.Abs(buf[c.joint])
				}
				if v := value(tBreak); !(v > limit) {
					t.Errorf("at the reported t=%g the %s is %g, within the limit %g", tBreak, c.kind, v, limit)
				}
				for at := cue.StartS(); at <= tBreak-step; at += step / 100 {
					if v := value(at); v > limit+limitSlack(limit) {
						t.Fatalf("the %s is already %g > %g at t=%g, more than one sample before the reported t=%g", c.kind, v, limit, at, tBreak)
					}
				}
				// The line is that of the last row at or before the break.
				tt, err := parseTimeTable(c.file, readCue(t, c.file), "cue", nil)
				if err != nil {
					t.Fatal(err)
				}
				wantLine := 0
				for _, r := range tt.rows {
					if r.values[0] <= tBreak {
						wantLine = r.line
					}
				}
				if fe.Line != wantLine {
					t.Errorf("reported line %d, but the last row at or before t=%g is on line %d", fe.Line, tBreak, wantLine)
				}

				if c.onlyBetweenRows {
					checkRowsWithinLimit(t, cue, c.file, c.joint, c.kind, limit)
				}
			})
		}
	}
}

// checkRowsWithinLimit asserts that looking at the rows alone would pass the
// cue: values and the spline at the rows within the limit, and for velocity
// also the row-to-row speed.
func checkRowsWithinLimit(t *testing.T, cue *Cue, file string, joint int, kind string, limit float64) {
	t.Helper()
	tt, err := parseTimeTable(file, readCue(t, file), "cue", nil)
	if err != nil {
		t.Fatal(err)
	}
	col := 0
	for i, name := range tt.columns {
		if name == cue.JointNames()[joint] {
			col = i
		}
	}
	buf := make([]float64, len(cue.JointNames()))
	for i, r := range tt.rows {
		switch kind {
		case "position":
			if r.values[col] > limit {
				t.Errorf("row on line %d is above the limit itself", r.line)
			}
		case "velocity":
			cue.VelocityTo(buf, r.values[0])
			if math.Abs(buf[joint]) > limit {
				t.Errorf("the spline's speed at the row on line %d is %g, already above %g", r.line, buf[joint], limit)
			}
			if i > 0 {
				p := tt.rows[i-1]
				if rate := math.Abs(r.values[col]-p.values[col]) / (r.values[0] - p.values[0]); rate > limit {
					t.Errorf("row-to-row speed %g before line %d is above %g", rate, r.line, limit)
				}
			}
		}
	}
}

func TestParseCueSettingsAndJoints(t *testing.T) {
	data := readCue(t, "valid.csv")
	for name, s := range map[string]CueSettings{
		"zero tick":        {},
		"negative tick":    {TickS: -0.004},
		"NaN tick":         {TickS: math.NaN()},
		"infinite tick":    {TickS: math.Inf(1)},
		"2 samples/tick":   {TickS: testTickS, SamplesPerTick: 2},
		"negative samples": {TickS: testTickS, SamplesPerTick: -1},
		"too many samples": {TickS: 1e-9},
	} {
		if _, err := ParseCue("valid.csv", data, testJoints(), s); err == nil {
			t.Errorf("%s: loaded without error", name)
		}
	}
	bad := map[string]func([]CueJoint) []CueJoint{
		"no joints":         func([]CueJoint) []CueJoint { return nil },
		"duplicate":         func(j []CueJoint) []CueJoint { j[1].Name = j[0].Name; return j },
		"comma in name":     func(j []CueJoint) []CueJoint { j[0].Name = "left,j1"; return j },
		"time_s as a joint": func(j []CueJoint) []CueJoint { j[0].Name = "time_s"; return j },
		"lower above upper": func(j []CueJoint) []CueJoint { j[0].Lower = 4; return j },
		"NaN bound":         func(j []CueJoint) []CueJoint { j[0].Upper = math.NaN(); return j },
		"zero velocity":     func(j []CueJoint) []CueJoint { j[0].MaxVelocity = 0; return j },
		"NaN acceleration":  func(j []CueJoint) []CueJoint { j[2].MaxAccel = math.NaN(); return j },
	}
	for name, f := range bad {
		if _, err := ParseCue("valid.csv", data, f(testJoints()), CueSettings{TickS: testTickS}); err == nil {
			t.Errorf("%s: loaded without error", name)
		}
	}
	// Continuous joints (no position bounds) and unlimited rates are fine;
	// an unlimited rate has no fraction of its limit.
	j := testJoints()
	j[0].Lower, j[0].Upper, j[0].MaxVelocity, j[0].MaxAccel = math.Inf(-1), math.Inf(1), math.Inf(1), math.Inf(1)
	c, err := ParseCue("valid.csv", data, j, CueSettings{TickS: testTickS, SamplesPerTick: 10})
	if err != nil {
		t.Fatal(err)
	}
	if p := c.Peaks()[0]; p.PeakSpeed == 0 || p.PeakSpeedOfLimit != 0 || p.PeakAccelOfLimit != 0 {
		t.Errorf("unlimited joint peaks %+v, want a speed and zero fractions", p)
	}
}

// Evaluation runs every tick: it must not allocate.
func TestCueEvaluationAllocatesNothing(t *testing.T) {
	c := loadCue(t, "valid.csv", testJoints(), CueSettings{TickS: testTickS})
	q, v, a := make([]float64, 3), make([]float64, 3), make([]float64, 3)
	at := 0.0
	allocs := testing.AllocsPerRun(200, func() {
		c.PositionTo(q, at)
		c.VelocityTo(v, at)
		c.AccelTo(a, at)
		at += 0.03
	})
	if allocs != 0 {
		t.Errorf("%g allocations per evaluation, want 0", allocs)
	}
}

// benchCue is an invented 12-joint cue (two 6-axis arms), one row every
// 0.1 s for 60 s: joint j swings 0.25·(1 − cos) through j+1 whole periods,
// so it starts and ends at rest (as a cue must, or the clamped ends would
// ask for an acceleration spike) and stays well inside the limits.
func benchCue(b *testing.B) *Cue {
	const joints, rows = 12, 601
	var sb strings.Builder
	sb.WriteString("time_s")
	cj := make([]CueJoint, joints)
	for j := range cj {
		arm := "left"
		if j >= 6 {
			arm = "right"
		}
		cj[j] = CueJoint{Name: fmt.Sprintf("%s.j%d", arm, j%6+1), Lower: -3, Upper: 3, MaxVelocity: 3, MaxAccel: 10}
		sb.WriteString("," + cj[j].Name)
	}
	sb.WriteString("\n")
	for i := 0; i < rows; i++ {
		ts := 0.1 * float64(i)
		fmt.Fprintf(&sb, "%g", ts)
		for j := 0; j < joints; j++ {
			fmt.Fprintf(&sb, ",%.6f", 0.25*(1-math.Cos(2*math.Pi*float64(j+1)*ts/60)))
		}
		sb.WriteString("\n")
	}
	c, err := ParseCue("bench.csv", []byte(sb.String()), cj, CueSettings{TickS: testTickS})
	if err != nil {
		b.Fatal(err)
	}
	return c
}

// BenchmarkCuePositionVelocity12Joints is what the planner pays per horizon
// step for the nominal: position and velocity of 12 joints at one time.
func BenchmarkCuePositionVelocity12Joints(b *testing.B) {
	c := benchCue(b)
	q, v := make([]float64, 12), make([]float64, 12)
	b.ReportAllocs()
	at := 0.0
	for b.Loop() {
		c.PositionTo(q, at)
		c.VelocityTo(v, at)
		at += testTickS
		if at > c.EndS() {
			at = 0
		}
	}
}

// BenchmarkParseCue12Joints60s measures loading, mostly the limit check's
// sampling (60 s at 4 samples per 4 ms tick = 60 000 samples × 12 joints).
func BenchmarkParseCue12Joints60s(b *testing.B) {
	b.ReportAllocs()
	for b.Loop() {
		benchCue(b)
	}
}
