package mpc

import (
	"math"
	"strings"
	"testing"

	"gonum.org/v1/gonum/interp"
)

var testMarkers = []string{"hand", "head"}

// ref_valid.csv lists head.z, head.x, hand.x, head.y, hand.y, hand.z; the
// Reference writes hand x y z, head x y z, passes through every row and
// between rows is gonum's interp.ClampedCubic per coordinate (the same
// clamped spline as the cue; reference library check).
func TestParseReferenceValid(t *testing.T) {
	r, err := ParseReference("ref_valid.csv", readCue(t, "ref_valid.csv"), testMarkers)
	if err != nil {
		t.Fatal(err)
	}
	if r.StartS() != 0 || r.EndS() != 2 || strings.Join(r.MarkerIDs(), ",") != "hand,head" || r.File() != "ref_valid.csv" {
		t.Errorf("start %g end %g markers %v file %q", r.StartS(), r.EndS(), r.MarkerIDs(), r.File())
	}
	// ref_valid.csv per coordinate, rearranged by hand: hand x y z, head x y z.
	times := []float64{0, 1, 2}
	coords := [6][]float64{
		{0.20, 0.25, 0.20}, {0.10, 0.12, 0.10}, {1.10, 1.15, 1.10},
		{0.00, 0.05, 0.10}, {0.00, 0.01, 0.00}, {1.50, 1.52, 1.50},
	}
	got := make([]float64, 6)
	for i, at := range times {
		r.MarkersTo(got, at)
		for k := range got {
			if got[k] != coords[k][i] {
				t.Errorf("t=%g coordinate %d: %g, want the row's %g", at, k, got[k], coords[k][i])
			}
		}
	}
	for k, ys := range coords {
		var ref interp.ClampedCubic
		if err := ref.Fit(times, ys); err != nil {
			t.Fatal(err)
		}
		for s := 0; s <= 100; s++ {
			at := 2 * float64(s) / 100
			r.MarkersTo(got, at)
			if !closeTo(got[k], ref.Predict(at), 1e-12) { // same spline, two solvers: rounding only
				t.Fatalf("t=%g coordinate %d: %g, gonum %g", at, k, got[k], ref.Predict(at))
			}
		}
	}
	r.MarkersTo(got, 10)
	for k := range got {
		if got[k] != coords[k][2] {
			t.Errorf("after the end, coordinate %d is %g, want the last row's %g", k, got[k], coords[k][2])
		}
	}
}

func TestParseReferenceMalformed(t *testing.T) {
	for _, c := range []struct {
		name, data string
		line, col  int
		field, msg string
	}{
		{"ref_missing_axis.csv", "", 1, 0, "hand.z", "no column hand.z"},
		{"ref_unknown_marker.csv", "", 1, 50, "foot.w (column 8)", `"foot.w" is not <marker>.x, .y or .z`},
		{"dup.csv", "time_s,hand.x,hand.y,hand.z,head.x,head.y,head.z,hand.y\n0,0,0,0,0,0,0,0\n1,0,0,0,0,0,0,0\n", 1, 50, "hand.y (column 8)", "already column 3"},
		{"one.csv", "time_s,hand.x,hand.y,hand.z,head.x,head.y,head.z\n0,0,0,0,0,0,0\n", 2, 0, "", "has 1 row(s)"},
		{"text.csv", "time_s,hand.x,hand.y,hand.z,head.x,head.y,head.z\n0,0,0,0,0,0,0\n1,0,0,0,0,up,0\n", 3, 11, "head.y (column 6)", `"up" is not a number`},
		{"kind.csv", "# tautline.cue/1\ntime_s,hand.x,hand.y,hand.z,head.x,head.y,head.z\n0,0,0,0,0,0,0\n1,0,0,0,0,0,0\n", 1, 0, "", "is not a reference file"},
	} {
		t.Run(c.name, func(t *testing.T) {
			data := []byte(c.data)
			if c.data == "" {
				data = readCue(t, c.name)
			}
			_, err := ParseReference(c.name, data, testMarkers)
			fe, n := firstFileError(t, err)
			if n != 1 {
				t.Errorf("%d errors, want 1: %v", n, err)
			}
			if fe.File != c.name || fe.Line != c.line || fe.Col != c.col || fe.Field != c.field || !strings.Contains(fe.Msg, c.msg) {
				t.Errorf("got %s:%d:%d field %q msg %q; want %s:%d:%d field %q msg containing %q",
					fe.File, fe.Line, fe.Col, fe.Field, fe.Msg, c.name, c.line, c.col, c.field, c.msg)
			}
		})
	}
	for name, ids := range map[string][]string{"no markers": nil, "twice": {"a", "a"}, "comma": {"a,b"}} {
		if _, err := ParseReference("ref_valid.csv", readCue(t, "ref_valid.csv"), ids); err == nil {
			t.Errorf("%s: no error", name)
		}
	}
}

func TestReferenceEvaluation(t *testing.T) {
	r, err := ParseReference("ref_valid.csv", readCue(t, "ref_valid.csv"), testMarkers)
	if err != nil {
		t.Fatal(err)
	}
	dst := make([]float64, 6)
	at := -0.5
	if allocs := testing.AllocsPerRun(200, func() { r.MarkersTo(dst, at); at += 0.02 }); allocs != 0 {
		t.Errorf("%g allocations per MarkersTo, want 0", allocs)
	}
	defer func() {
		if recover() == nil {
			t.Error("MarkersTo with a destination of the wrong length did not panic")
		}
	}()
	r.MarkersTo(make([]float64, 5), math.Pi)
}
