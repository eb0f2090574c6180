package sim

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"strconv"
	"strings"
)

// FileError is a problem found in an input file. It names the file, the
// position (1-based line and column; zero when unknown) and the field, so a
// user can go straight to it.
type FileError struct {
	File  string // file name as given by the caller
	Line  int    // 1-based; 0 if unknown
	Col   int    // 1-based; 0 if unknown
	Field string // path of the field, e.g. "nodes[3].mass_kg"; may be empty
	Msg   string // what is wrong and, where it helps, what to do
}

func (e *FileError) Error() string {
	var b strings.Builder
	b.WriteString(e.File)
	if e.Line > 0 {
		fmt.Fprintf(&b, ":%d", e.Line)
		if e.Col > 0 {
			fmt.Fprintf(&b, ":%d", e.Col)
		}
	}
	if e.Field != "" {
		fmt.Fprintf(&b, ": %s", e.Field)
	}
	b.WriteString(": ")
	b.WriteString(e.Msg)
	return b.String()
}

// FileErrors is every problem found in one file, in file order.
type FileErrors []*FileError

func (es FileErrors) Error() string {
	msgs := make([]string, len(es))
	for i, e := range es {
		msgs[i] = e.Error()
	}
	return strings.Join(msgs, "\n")
}

// Unwrap lets errors.As find the individual FileError values.
func (es FileErrors) Unwrap() []error {
	out := make([]error, len(es))
	for i, e := range es {
		out[i] = e
	}
	return out
}

// errOrNil returns nil for an empty list, so callers can `return errs.errOrNil()`.
func (es FileErrors) errOrNil() error {
	if len(es) == 0 {
		return nil
	}
	return es
}

// jsonDoc is a JSON document with the byte offset of every value indexed by
// its path ("a.b[2].c"), so validation that runs after decoding can still
// point at a line and column.
type jsonDoc struct {
	file    string
	data    []byte
	offsets map[string]int64
}

// newJSONDoc indexes data. A syntax error is returned as a *FileError with
// its position.
func newJSONDoc(file string, data []byte) (*jsonDoc, error) {
	d := &jsonDoc{file: file, data: data, offsets: make(map[string]int64)}
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.UseNumber()
	if err := d.walk(dec, ""); err != nil {
		var se *json.SyntaxError
		if errors.As(err, &se) {
			return nil, d.errAt(se.Offset, "", "JSON syntax: "+se.Error())
		}
		return nil, d.errAt(dec.InputOffset(), "", "JSON: "+err.Error())
	}
	if _, err := dec.Token(); err == nil {
		return nil, d.errAt(dec.InputOffset(), "", "unexpected data after the top-level value")
	}
	return d, nil
}

// walk records the offset of the value at path and of everything inside it.
func (d *jsonDoc) walk(dec *json.Decoder, path string) error {
	// The offset before Token is the end of the previous token; skip the
	// separators to land on the value itself.
	start := skipSpaceAndSep(d.data, dec.InputOffset())
	tok, err := dec.Token()
	if err != nil {
		return err
	}
	d.offsets[path] = start
	delim, ok := tok.(json.Delim)
	if !ok {
		return nil
	}
	switch delim {
	case '{':
		for dec.More() {
			kt, err := dec.Token()
			if err != nil {
				return err
			}
			key, _ := kt.(string)
			child := key
			if path != "" {
				child = path + "." + key
			}
			if err := d.walk(dec, child); err != nil {
				return err
			}
		}
	case '[':
		for i := 0; dec.More(); i++ {
			if err := d.walk(dec, path+"["+strconv.Itoa(i)+"]"); err != nil {
				return err
			}
		}
	}
	_, err = dec.Token() // closing delimiter
	return err
}

func skipSpaceAndSep(data []byte, off int64) int64 {
	for off < int64(len(data)) {
		switch data[off] {
		case ' ', '\t', '\n', '\r', ',', ':':
			off++
		default:
			return off
		}
	}
	return off
}

// lineCol converts a byte offset to a 1-based line and column.
func lineCol(data []byte, off int64) (line, col int) {
	if off > int64(len(data)) {
		off = int64(len(data))
	}
	line = 1 + bytes.Count(data[:off], []byte{'\n'})
	col = int(off) - bytes.LastIndexByte(data[:off], '\n')
	return line, col
}

func (d *jsonDoc) errAt(off int64, field, msg string) *FileError {
	line, col := lineCol(d.data, off)
	return &FileError{File: d.file, Line: line, Col: col, Field: field, Msg: msg}
}

// errf makes an error for the value at path. If the path itself is absent
// (a missing field), the nearest present parent gives the position.
func (d *jsonDoc) errf(path, format string, args ...any) *FileError {
	p := path
	for {
		if off, ok := d.offsets[p]; ok {
			return d.errAt(off, path, fmt.Sprintf(format, args...))
		}
		if p == "" {
			return &FileError{File: d.file, Field: path, Msg: fmt.Sprintf(format, args...)}
		}
		p = parentPath(p)
	}
}

// has reports whether the document holds a value at path.
func (d *jsonDoc) has(path string) bool {
	_, ok := d.offsets[path]
	return ok
}

func parentPath(p string) string {
	i := strings.LastIndexAny(p, ".[")
	if i < 0 {
		return ""
	}
	return p[:i]
}

// decodeStrict decodes the document into v, refusing unknown fields; the
// error names the field and its position.
func (d *jsonDoc) decodeStrict(v any) error {
	dec := json.NewDecoder(bytes.NewReader(d.data))
	dec.DisallowUnknownFields()
	if err := dec.Decode(v); err != nil {
		var te *json.UnmarshalTypeError
		if errors.As(err, &te) {
			return d.errAt(te.Offset, te.Field, fmt.Sprintf("has a %s where a %s is expected", te.Value, te.Type))
		}
		if msg := err.Error(); strings.HasPrefix(msg, "json: unknown field ") {
			name, _ := strconv.Unquote(strings.TrimPrefix(msg, "json: unknown field "))
			off := dec.InputOffset()
			if i := bytes.LastIndex(d.data[:off], []byte(strconv.Quote(name))); i >= 0 {
				off = int64(i)
			}
			return d.errAt(off, name, "unknown field (check the spelling against the format's documentation)")
		}
		return d.errAt(dec.InputOffset(), "", err.Error())
	}
	return nil
}
