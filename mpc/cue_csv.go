package mpc

import (
	"bytes"
	"errors"
	"fmt"
	"strconv"
	"strings"

	"tautline/sim"
)

// timeTable is a parsed time-series CSV: the cue file and the reference
// file share it. The format:
//
//   - UTF-8 text; a leading byte-order mark and CR before LF are accepted.
//   - Blank lines and lines whose first non-blank character is '#' are
//     ignored. A comment "# tautline.<kind>/<version>" before the header
//     declares the format version; only version 1 exists.
//   - The first other line is the header: comma-separated names, the first
//     of which is time_s. Spaces around names and values are ignored; there
//     is no quoting (no name or number needs it).
//   - Every following line is a row with exactly as many fields as the
//     header, each a finite decimal number; time_s strictly increases.
type timeTable struct {
	file       string
	data       []byte
	headerLine int
	columns    []string // header names, columns[0] == "time_s"
	headerCols []int    // 1-based character column of each header name
	rows       []tableRow
}

type tableRow struct {
	line   int
	offset int       // byte offset of the line's start in data
	values []float64 // one per column
}

// maxFileErrors bounds how many problems one file reports; past it the list
// ends with a note, since the rest is usually the same mistake repeated.
const maxFileErrors = 20

// fieldName is how errors name a CSV column: its header name and its
// 1-based column number.
func fieldName(name string, column int) string {
	if name == "" {
		return fmt.Sprintf("column %d", column)
	}
	return fmt.Sprintf("%s (column %d)", name, column)
}

type errorList struct {
	file string
	errs sim.FileErrors
}

func (l *errorList) add(line, col int, field, format string, args ...any) {
	if len(l.errs) == maxFileErrors {
		l.errs = append(l.errs, &sim.FileError{File: l.file, Line: line, Msg: "too many problems; stopping here"})
	}
	if len(l.errs) > maxFileErrors {
		return
	}
	l.errs = append(l.errs, &sim.FileError{File: l.file, Line: line, Col: col, Field: field, Msg: fmt.Sprintf(format, args...)})
}

func (l *errorList) err() error {
	if len(l.errs) == 0 {
		return nil
	}
	return l.errs
}

// csvLine is one line of the file split into trimmed fields with the 1-based
// character column where each field's text starts.
type csvLine struct {
	line   int
	offset int
	fields []string
	cols   []int
}

func splitCSVLine(text string, line, offset int) csvLine {
	l := csvLine{line: line, offset: offset}
	start := 0
	for {
		end := strings.IndexByte(text[start:], ',')
		last := end < 0
		if last {
			end = len(text)
		} else {
			end += start
		}
		raw := text[start:end]
		trimmed := strings.TrimLeft(raw, " \t")
		col := start + (len(raw) - len(trimmed)) + 1
		l.fields = append(l.fields, strings.TrimRight(trimmed, " \t"))
		l.cols = append(l.cols, col)
		if last {
			return l
		}
		start = end + 1
	}
}

// parseTimeTable reads the table; kind ("cue", "reference") names the format
// in the version comment and in messages. checkHeader, if not nil, runs as
// soon as the header is read, so its problems are listed in file order with
// the rows' problems.
func parseTimeTable(file string, data []byte, kind string, checkHeader func(*timeTable, *errorList)) (*timeTable, error) {
	el := &errorList{file: file}
	tt := &timeTable{file: file, data: data}
	body := data
	bomLen := 0
	if bytes.HasPrefix(body, []byte("\xef\xbb\xbf")) {
		bomLen = 3
	}
	var header *csvLine
	lineNo := 0
	prevTime, prevTimeLine := 0.0, 0
	for off := bomLen; off < len(body); {
		end := bytes.IndexByte(body[off:], '\n')
		next := len(body)
		if end < 0 {
			end = len(body)
		} else {
			end += off
			next = end + 1
		}
		lineNo++
		lineStart := off // after a BOM on line 1: columns count as an editor shows them
		text := strings.TrimSuffix(string(body[off:end]), "\r")
		off = next
		trimmed := strings.TrimSpace(text)
		if trimmed == "" {
			continue
		}
		if trimmed[0] == '#' {
			if header == nil {
				checkVersionComment(el, lineNo, trimmed, kind)
			}
			continue
		}
		l := splitCSVLine(text, lineNo, lineStart)
		if header == nil {
			header = &l
			tt.headerLine = lineNo
			tt.columns = l.fields
			tt.headerCols = l.cols
			if l.fields[0] != "time_s" {
				el.add(lineNo, l.cols[0], fieldName(l.fields[0], 1), "the first column must be time_s (the %s time in seconds), found %q", kind, l.fields[0])
			}
			for i, name := range l.fields {
				if name == "" {
					el.add(lineNo, l.cols[i], fieldName("", i+1), "empty column name in the header")
				}
			}
			if len(l.fields) < 2 {
				el.add(lineNo, 0, "", "the header names no column after time_s")
			}
			if checkHeader != nil {
				checkHeader(tt, el)
			}
			continue
		}
		if len(l.fields) != len(header.fields) {
			el.add(lineNo, 0, "", "row has %d fields, the header (line %d) has %d", len(l.fields), header.line, len(header.fields))
			continue
		}
		row := tableRow{line: lineNo, offset: l.offset, values: make([]float64, len(l.fields))}
		ok := true
		for i, f := range l.fields {
			v, msg := parseFinite(f)
			if msg != "" {
				el.add(lineNo, l.cols[i], fieldName(header.fields[i], i+1), "%s", msg)
				ok = false
				continue
			}
			row.values[i] = v
		}
		if !ok {
			continue
		}
		t := row.values[0]
		if prevTimeLine > 0 && !(t > prevTime) {
			el.add(lineNo, l.cols[0], fieldName("time_s", 1), "time %s s is not after %s s on line %d; times must strictly increase", fmtTime(t), fmtTime(prevTime), prevTimeLine)
		}
		prevTime, prevTimeLine = t, lineNo
		tt.rows = append(tt.rows, row)
	}
	if header == nil {
		el.add(lineNo, 0, "", "no header line; a %s file starts with time_s,<name>,…", kind)
	}
	if err := el.err(); err != nil {
		return nil, err
	}
	return tt, nil
}

func checkVersionComment(el *errorList, line int, comment, kind string) {
	text := strings.TrimSpace(strings.TrimPrefix(comment, "#"))
	prefix := "tautline." + kind + "/"
	if !strings.HasPrefix(text, "tautline.") {
		return
	}
	if !strings.HasPrefix(text, prefix) {
		el.add(line, 0, "", "format %q is not a %s file (want %s1)", text, kind, prefix)
		return
	}
	if v := strings.Fields(text[len(prefix):]); len(v) == 0 || v[0] != "1" {
		el.add(line, 0, "", "unsupported format version %q; this build reads %s1", text, prefix)
	}
}

// parseFinite parses a decimal number and refuses NaN, infinities and
// overflow; the message says what is wrong with the text.
func parseFinite(f string) (float64, string) {
	if f == "" {
		return 0, "empty value; every cell must hold a number"
	}
	v, err := strconv.ParseFloat(f, 64)
	if err != nil {
		if errors.Is(err, strconv.ErrRange) && !isFinite(v) {
			return 0, fmt.Sprintf("%q is out of range for a 64-bit float", f)
		}
		if !errors.Is(err, strconv.ErrRange) {
			return 0, fmt.Sprintf("%q is not a number", f)
		}
		// Underflow to zero or a subnormal: accept the rounded value.
	}
	if !isFinite(v) {
		return 0, fmt.Sprintf("%q is not finite; every value must be a finite number", f)
	}
	return v, ""
}

// fmtNum prints a number for a message: short, but exact enough to find the
// row.
func fmtNum(v float64) string { return strconv.FormatFloat(v, 'g', 6, 64) }

// fmtTime prints a cue time for a message: 9 significant digits keep
// sub-millisecond resolution for cues up to hours long while rounding away
// floating-point noise such as 0.7810000000000001.
func fmtTime(t float64) string { return strconv.FormatFloat(t, 'g', 9, 64) }

// columnOfField returns the 1-based character column where field i of the
// row starts, for messages about a row found after parsing.
func (tt *timeTable) columnOfField(r tableRow, i int) int {
	end := bytes.IndexByte(tt.data[r.offset:], '\n')
	if end < 0 {
		end = len(tt.data) - r.offset
	}
	text := strings.TrimSuffix(string(tt.data[r.offset:r.offset+end]), "\r")
	l := splitCSVLine(text, r.line, r.offset)
	if i < len(l.cols) {
		return l.cols[i]
	}
	return 0
}

// rowBefore returns the index of the last row whose time is at or before t
// (0 if t is before every row).
func (tt *timeTable) rowBefore(t float64) int {
	i := 0
	for lo, hi := 0, len(tt.rows)-1; lo <= hi; {
		mid := (lo + hi) / 2
		if tt.rows[mid].values[0] <= t {
			i = mid
			lo = mid + 1
		} else {
			hi = mid - 1
		}
	}
	return i
}

// atLeastTwoRows reports a table with fewer than two rows, on the header
// line or the only row; what says what the rows are ("the cue") and hint
// is appended to the message.
func (tt *timeTable) atLeastTwoRows(file, what, hint string) error {
	if len(tt.rows) >= 2 {
		return nil
	}
	line := tt.headerLine
	if len(tt.rows) == 1 {
		line = tt.rows[0].line
	}
	return sim.FileErrors{{File: file, Line: line, Msg: fmt.Sprintf("%s has %d row(s); it needs at least 2%s", what, len(tt.rows), hint)}}
}

// knotsAndValues returns the row times and, row-major, each row's values of
// the columns in order (order[k] is the CSV column of output k).
func (tt *timeTable) knotsAndValues(order []int) (knots, values []float64) {
	n, nc := len(tt.rows), len(order)
	knots = make([]float64, n)
	values = make([]float64, n*nc)
	for i, r := range tt.rows {
		knots[i] = r.values[0]
		for k, c := range order {
			values[i*nc+k] = r.values[c]
		}
	}
	return knots, values
}
