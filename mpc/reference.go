package mpc

import (
	"fmt"
	"strings"

	"tautline/sim"
)

// Reference is an explicit reference motion of the figure's markers: where
// each marker should be, in the world frame (m), over cue time. It is
// optional; without it the reference is the cue simulated on the cell's
// model.
//
// The file is a CSV in the cue's format (see ParseCue; version comment
// "# tautline.reference/1") with header
//
//	time_s,<marker>.x,<marker>.y,<marker>.z,…
//
// naming x, y and z of every marker of the cell exactly once, in any column
// order. Each coordinate is interpolated by the same clamped C² cubic spline
// as the cue (zero velocity at the first and last row: the figure is at rest
// before and after the cue), and held outside the first and last row.
//
// A Reference is immutable after loading; evaluation allocates nothing.
type Reference struct {
	file      string
	markerIDs []string
	spline    *cubicSpline
}

// ParseReference reads a reference file for the cell's markers (in the
// cell's order). Problems are returned as sim.FileErrors naming the file,
// line, character column and CSV column.
func ParseReference(file string, data []byte, markerIDs []string) (*Reference, error) {
	if len(markerIDs) == 0 {
		return nil, fmt.Errorf("mpc: a reference needs at least one marker")
	}
	index := make(map[string]int, 3*len(markerIDs))
	for m, id := range markerIDs {
		if id == "" || strings.ContainsAny(id, ",\r\n") || strings.TrimSpace(id) != id {
			return nil, fmt.Errorf("mpc: marker id %q cannot be a CSV column name", id)
		}
		for a, axis := range [...]string{"x", "y", "z"} {
			name := id + "." + axis
			if _, dup := index[name]; dup {
				return nil, fmt.Errorf("mpc: marker %q is listed twice", id)
			}
			index[name] = 3*m + a
		}
	}
	order := make([]int, 3*len(markerIDs))
	mapColumns := func(tt *timeTable, el *errorList) {
		for k := range order {
			order[k] = -1
		}
		for i := 1; i < len(tt.columns); i++ {
			name := tt.columns[i]
			k, ok := index[name]
			switch {
			case !ok:
				el.add(tt.headerLine, tt.headerCols[i], fieldName(name, i+1), "%q is not <marker>.x, .y or .z of a marker of the cell; its markers are %s", name, strings.Join(markerIDs, ", "))
			case order[k] >= 0:
				el.add(tt.headerLine, tt.headerCols[i], fieldName(name, i+1), "%s appears again; it is already column %d (every coordinate exactly once)", name, order[k]+1)
			default:
				order[k] = i
			}
		}
		for k, c := range order {
			if c < 0 {
				name := markerIDs[k/3] + "." + [...]string{"x", "y", "z"}[k%3]
				el.add(tt.headerLine, 0, name, "the header has no column %s; every marker needs x, y and z", name)
			}
		}
	}
	tt, err := parseTimeTable(file, data, "reference", mapColumns)
	if err != nil {
		return nil, err
	}
	if err := tt.atLeastTwoRows(file, "the reference", ""); err != nil {
		return nil, err
	}
	nc := len(order)
	knots, values := tt.knotsAndValues(order)
	sp, err := fitClampedSpline(knots, values, nc, nil, nil)
	if err != nil {
		return nil, sim.FileErrors{{File: file, Line: tt.rows[0].line, Msg: err.Error()}}
	}
	return &Reference{file: file, markerIDs: append([]string(nil), markerIDs...), spline: sp}, nil
}

// File returns the reference file's name as given to ParseReference.
func (r *Reference) File() string { return r.file }

// MarkerIDs returns the markers in the order MarkersTo writes them. The
// caller must not modify it.
func (r *Reference) MarkerIDs() []string { return r.markerIDs }

// StartS returns the time of the first row, s.
func (r *Reference) StartS() float64 { return r.spline.startS() }

// EndS returns the time of the last row, s.
func (r *Reference) EndS() float64 { return r.spline.endS() }

// MarkersTo writes the reference position of every marker at cue time t
// into dst as x, y, z per marker in MarkerIDs order, world frame, m.
// len(dst) must be 3·len(MarkerIDs()); it panics otherwise, and on a NaN t.
// Outside [StartS, EndS] it holds the first or last row.
func (r *Reference) MarkersTo(dst []float64, t float64) { r.spline.positionTo(dst, t) }
