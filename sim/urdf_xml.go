package sim

import (
	"bytes"
	"encoding/xml"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
)

// xmlPos is a position in the file: byte offset and 1-based line and column.
type xmlPos struct {
	off       int64
	line, col int
}

// xmlElem is a start tag with where it sits in the file.
type xmlElem struct {
	name  xml.Name
	attrs []xml.Attr
	at    xmlPos // the '<' of the start tag
	end   int64  // offset just past the start tag's '>'
}

// next returns the next token and the position where it starts.
func (p *urdfParser) next() (xml.Token, xmlPos, error) {
	line, col := p.dec.InputPos()
	at := xmlPos{off: p.dec.InputOffset(), line: line, col: col}
	tok, err := p.dec.Token()
	if err != nil {
		if err == io.EOF {
			return nil, at, err
		}
		var se *xml.SyntaxError
		if errors.As(err, &se) {
			p.errs = append(p.errs, &FileError{File: p.file, Line: se.Line, Msg: "not well-formed XML: " + se.Msg})
		} else {
			msg := "XML: " + err.Error()
			if strings.Contains(msg, "CharsetReader") {
				msg = "the file declares an encoding other than UTF-8: save it as UTF-8 (" + err.Error() + ")"
			}
			p.errs = append(p.errs, &FileError{File: p.file, Line: at.line, Col: at.col, Msg: msg})
		}
		return nil, at, errFatal
	}
	return tok, at, nil
}

// nextChild returns the next child element of the element being read, or
// ok=false at its end tag. Text, comments and processing instructions are
// passed over.
func (p *urdfParser) nextChild() (el xmlElem, ok bool, err error) {
	for {
		tok, at, err := p.next()
		if err == io.EOF {
			p.errs = append(p.errs, &FileError{File: p.file, Line: at.line, Col: at.col, Msg: "unexpected end of file inside an element"})
			return xmlElem{}, false, errFatal
		}
		if err != nil {
			return xmlElem{}, false, err
		}
		switch t := tok.(type) {
		case xml.StartElement:
			return xmlElem{name: t.Name, attrs: t.Attr, at: at, end: p.dec.InputOffset()}, true, nil
		case xml.EndElement:
			return xmlElem{}, false, nil
		}
	}
}

// skip consumes the rest of the element whose start tag was just read.
func (p *urdfParser) skip() error {
	for {
		_, ok, err := p.nextChild()
		if err != nil {
			return err
		}
		if !ok {
			return nil
		}
		if err := p.skip(); err != nil {
			return err
		}
	}
}

// linkRef reads the link attribute of a <parent> or <child> element.
func (p *urdfParser) linkRef(c xmlElem, field string) (string, bool) {
	v, ok := attr(c, "link")
	if !ok || v == "" {
		p.errAttr(c, "link", field+"@link", "<%s> needs a non-empty link attribute", c.name.Local)
		return "", false
	}
	return v, true
}

// number reads an optional attribute holding one finite number.
func (p *urdfParser) number(el xmlElem, name, field string, def float64) (float64, bool) {
	s, ok := attr(el, name)
	if !ok {
		return def, true
	}
	v, err := parseFinite(strings.TrimSpace(s))
	if err != nil {
		p.errAttr(el, name, field+"@"+name, "%q is not a finite number", s)
		return def, false
	}
	return v, true
}

// vec3 reads an optional attribute holding three finite numbers.
func (p *urdfParser) vec3(el xmlElem, name, field string, def [3]float64) ([3]float64, bool) {
	s, ok := attr(el, name)
	if !ok {
		return def, true
	}
	parts := strings.Fields(s)
	if len(parts) != 3 {
		p.errAttr(el, name, field+"@"+name, "%q has %d values, want three numbers separated by spaces", s, len(parts))
		return def, false
	}
	var v [3]float64
	for i, part := range parts {
		x, err := parseFinite(part)
		if err != nil {
			p.errAttr(el, name, field+"@"+name, "%q in %q is not a finite number", part, s)
			return def, false
		}
		v[i] = x
	}
	return v, true
}

// parseFinite parses a decimal number, refusing NaN and infinities.
func parseFinite(s string) (float64, error) {
	v, err := strconv.ParseFloat(s, 64)
	if err != nil {
		return 0, err
	}
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, errors.New("not finite")
	}
	return v, nil
}

// attr returns the value of the unqualified attribute name.
func attr(el xmlElem, name string) (string, bool) {
	for _, a := range el.attrs {
		if a.Name.Space == "" && a.Name.Local == name {
			return a.Value, true
		}
	}
	return "", false
}

// rawName returns the element name as written in the start tag, prefix
// included (the decoder replaces a declared prefix with its namespace URL).
func (p *urdfParser) rawName(el xmlElem) string {
	tag := p.data[el.at.off:el.end]
	if len(tag) == 0 || tag[0] != '<' {
		return el.name.Local
	}
	end := 1
	for end < len(tag) && !isXMLSpace(tag[end]) && tag[end] != '/' && tag[end] != '>' {
		end++
	}
	return string(tag[1:end])
}

// errAt records an error at a position.
func (p *urdfParser) errAt(at xmlPos, field, format string, args ...any) {
	p.errs = append(p.errs, p.newErr(at, field, format, args...))
}

// newErr makes an error at a position without recording it.
func (p *urdfParser) newErr(at xmlPos, field, format string, args ...any) *FileError {
	return &FileError{File: p.file, Line: at.line, Col: at.col, Field: field, Msg: fmt.Sprintf(format, args...)}
}

// errAttr records an error about attribute name of el, at the attribute if
// it is present in the start tag and at the element otherwise.
func (p *urdfParser) errAttr(el xmlElem, name, field, format string, args ...any) {
	p.errAt(p.attrPos(el, name), field, format, args...)
}

// attrPos is the position of attribute name in el's start tag, or of the
// element if the attribute is absent.
func (p *urdfParser) attrPos(el xmlElem, name string) xmlPos {
	at := el.at
	if off := attrOffset(p.data[el.at.off:el.end], name); off >= 0 {
		at.off = el.at.off + int64(off)
		at.line, at.col = lineCol(p.data, at.off)
	}
	return at
}

// attrOffset finds `name =` in a start tag, skipping matches inside quoted
// values; -1 if absent.
func attrOffset(tag []byte, name string) int {
	var quote byte
	for i := 0; i < len(tag); i++ {
		c := tag[i]
		if quote != 0 {
			if c == quote {
				quote = 0
			}
			continue
		}
		if c == '"' || c == '\'' {
			quote = c
			continue
		}
		if i == 0 || !isXMLSpace(tag[i-1]) || !bytes.HasPrefix(tag[i:], []byte(name)) {
			continue
		}
		k := i + len(name)
		for k < len(tag) && isXMLSpace(tag[k]) {
			k++
		}
		if k < len(tag) && tag[k] == '=' {
			return i
		}
	}
	return -1
}

func isXMLSpace(c byte) bool { return c == ' ' || c == '\t' || c == '\n' || c == '\r' }
