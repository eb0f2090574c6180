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

// URDF is the part of a URDF robot description (the ROS robot description
// format) that decides an arm's kinematics: its links and its joints. Read it
// with ParseURDF and take an arm out of it with Chain.
//
// # The subset read
//
//   - <robot> is the root. Its children <link> and <joint> are read;
//     <material>, <transmission>, <gazebo> and <ros2_control> are ignored.
//     Any other child, and any namespaced element such as an unexpanded xacro
//     macro, is refused.
//   - <link name="…">: only the name matters; its <visual>, <collision> and
//     <inertial> children are ignored.
//   - <joint name="…" type="…"> with type revolute, continuous, prismatic or
//     fixed. floating and planar joints are refused: they have no single axis
//     an arm drives. Its children: <origin xyz="…" rpy="…"/> (both default to
//     zero), <parent link="…"/> and <child link="…"/> (both required),
//     <axis xyz="…"/> (defaults to 1 0 0, normalised, a zero axis is refused),
//     <limit lower="…" upper="…" velocity="…" effort="…"/> (required for
//     revolute and prismatic joints; lower and upper default to 0 and must
//     satisfy lower < upper; velocity is required and positive). <mimic> is
//     refused (tautline drives every joint on its own); <dynamics>,
//     <calibration> and <safety_controller> are ignored; anything else inside
//     a joint is refused.
//   - The joints form one tree: every joint names existing links, a link has
//     at most one parent joint, there is exactly one root link and no loop.
//
// Every problem is reported as a *FileError naming the file, the line and
// column, and the element or attribute, e.g. `joint[j2]/limit@velocity`.
type URDF struct {
	File   string // file name given to ParseURDF, used in messages
	Name   string // the robot's name attribute (may be empty)
	Links  []URDFLink
	Joints []URDFJoint
}

// URDFLink is one <link> element.
type URDFLink struct {
	Name      string
	Line, Col int // position of the <link> element in the file
}

// URDFJoint is one <joint> element of the subset.
type URDFJoint struct {
	Name   string
	Kind   JointKind
	Parent string // parent link name
	Child  string // child link name

	// Origin maps the joint frame (at zero joint position) to the parent
	// link's frame: <origin xyz rpy>.
	Origin Pose
	// Axis is the joint axis in the joint frame, unit length. Meaningless for
	// fixed joints.
	Axis [3]float64
	// Lower and Upper are the position limits: rad for revolute joints, m for
	// prismatic joints, −Inf and +Inf for continuous and fixed joints.
	Lower, Upper float64
	// VelocityLimit is the largest speed, rad/s or m/s; +Inf when the file
	// gives none (possible for continuous and fixed joints only).
	VelocityLimit float64

	Line, Col int // position of the <joint> element in the file

	parentAt, childAt xmlPos // positions of the <parent> and <child> elements
}

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

// urdfParser walks the XML tokens, keeping positions for messages.
type urdfParser struct {
	file string
	data []byte
	dec  *xml.Decoder
	errs FileErrors
	u    *URDF
}

// errFatal stops the walk after an XML syntax error (already recorded).
var errFatal = errors.New("urdf: fatal")

// ParseURDF reads the URDF subset described at URDF from data. file names the
// data in messages. On failure the error is a FileErrors listing every
// problem found (errors.As finds each *FileError); a malformed XML document
// stops the reading at the first syntax error.
func ParseURDF(file string, data []byte) (*URDF, error) {
	p := &urdfParser{
		file: file,
		data: data,
		dec:  xml.NewDecoder(bytes.NewReader(data)),
		u:    &URDF{File: file},
	}
	p.dec.Strict = true
	if err := p.document(); err != nil && err != errFatal {
		return nil, err
	}
	if len(p.errs) == 0 {
		p.checkTree()
	}
	if err := p.errs.errOrNil(); err != nil {
		return nil, err
	}
	return p.u, nil
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

// document reads the root <robot> element.
func (p *urdfParser) document() error {
	var root xmlElem
	for {
		tok, at, err := p.next()
		if err == io.EOF {
			p.errs = append(p.errs, &FileError{File: p.file, Line: 1, Msg: "no <robot> element: this is not a URDF file"})
			return errFatal
		}
		if err != nil {
			return err
		}
		if t, ok := tok.(xml.StartElement); ok {
			root = xmlElem{name: t.Name, attrs: t.Attr, at: at, end: p.dec.InputOffset()}
			break
		}
	}
	if root.name.Local != "robot" || root.name.Space != "" {
		p.errAt(root.at, p.rawName(root), "the root element is <%s>, a URDF file has <robot>", p.rawName(root))
		return errFatal
	}
	p.u.Name, _ = attr(root, "name")
	for {
		el, ok, err := p.nextChild()
		if err != nil {
			return err
		}
		if !ok {
			break
		}
		switch {
		case el.name.Space != "":
			p.errAt(el.at, p.rawName(el), "namespaced element <%s>: expand xacro macros (or other extensions) before giving the file to tautline", p.rawName(el))
		case el.name.Local == "link":
			p.link(el)
		case el.name.Local == "joint":
			if err := p.joint(el); err != nil {
				return err
			}
			continue // joint consumed its own children
		case el.name.Local == "material", el.name.Local == "transmission", el.name.Local == "gazebo", el.name.Local == "ros2_control":
			// Harmless: no effect on kinematics.
		default:
			p.errAt(el.at, el.name.Local, "unknown element <%s> under <robot>: tautline reads <link> and <joint> and ignores <material>, <transmission>, <gazebo> and <ros2_control>", el.name.Local)
		}
		if err := p.skip(); err != nil {
			return err
		}
	}
	// Anything after the root element must be well-formed too.
	for {
		tok, at, err := p.next()
		if err == io.EOF {
			return nil
		}
		if err != nil {
			return err
		}
		if t, ok := tok.(xml.StartElement); ok {
			p.errAt(at, t.Name.Local, "a second top-level element <%s> after </robot>", t.Name.Local)
			return errFatal
		}
	}
}

// link reads a <link> start tag; its children are skipped by the caller.
func (p *urdfParser) link(el xmlElem) {
	name, ok := attr(el, "name")
	if !ok || name == "" {
		p.errAttr(el, "name", "link", "a <link> needs a non-empty name attribute")
		return
	}
	p.u.Links = append(p.u.Links, URDFLink{Name: name, Line: el.at.line, Col: el.at.col})
}

// joint reads a <joint> element and its children.
func (p *urdfParser) joint(el xmlElem) error {
	j := URDFJoint{
		Origin:        Identity(),
		Axis:          [3]float64{1, 0, 0}, // URDF default axis
		Lower:         math.Inf(-1),
		Upper:         math.Inf(1),
		VelocityLimit: math.Inf(1),
		Line:          el.at.line,
		Col:           el.at.col,
	}
	good := true
	name, ok := attr(el, "name")
	field := "joint"
	if !ok || name == "" {
		p.errAttr(el, "name", field, "a <joint> needs a non-empty name attribute")
		good = false
	} else {
		field = "joint[" + name + "]"
	}
	j.Name = name

	typ, ok := attr(el, "type")
	switch {
	case !ok:
		p.errAttr(el, "type", field+"@type", "a <joint> needs a type attribute (revolute, continuous, prismatic or fixed)")
		good = false
	case typ == "revolute":
		j.Kind = Revolute
	case typ == "continuous":
		j.Kind = Continuous
	case typ == "prismatic":
		j.Kind = Prismatic
	case typ == "fixed":
		j.Kind = Fixed
	case typ == "floating", typ == "planar":
		p.errAttr(el, "type", field+"@type", "type %q is not supported: an arm joint has one axis; tautline reads revolute, continuous, prismatic and fixed joints", typ)
		good = false
	default:
		p.errAttr(el, "type", field+"@type", "unknown joint type %q: tautline reads revolute, continuous, prismatic and fixed joints", typ)
		good = false
	}

	var seen [5]bool // origin, parent, child, axis, limit
	once := func(c xmlElem, k int) bool {
		if seen[k] {
			p.errAt(c.at, field+"/"+c.name.Local, "a joint has at most one <%s>", c.name.Local)
			good = false
			return false
		}
		seen[k] = true
		return true
	}
	var limitEl xmlElem
	var lower, upper, velocity float64
	hasVelocity, limitNumbersOK := false, false
	for {
		c, ok, err := p.nextChild()
		if err != nil {
			return err
		}
		if !ok {
			break
		}
		cf := field + "/" + c.name.Local
		switch {
		case c.name.Space != "":
			p.errAt(c.at, field+"/"+p.rawName(c), "namespaced element <%s> inside a joint: expand xacro macros (or other extensions) first", p.rawName(c))
			good = false
		case c.name.Local == "origin":
			if once(c, 0) {
				xyz, ok1 := p.vec3(c, "xyz", cf, [3]float64{})
				rpy, ok2 := p.vec3(c, "rpy", cf, [3]float64{})
				good = good && ok1 && ok2
				j.Origin = PoseFromXYZRPY(xyz, rpy)
			}
		case c.name.Local == "parent":
			if once(c, 1) {
				var okRef bool
				j.Parent, okRef = p.linkRef(c, cf)
				good = good && okRef
				j.parentAt = c.at
			}
		case c.name.Local == "child":
			if once(c, 2) {
				var okRef bool
				j.Child, okRef = p.linkRef(c, cf)
				good = good && okRef
				j.childAt = c.at
			}
		case c.name.Local == "axis":
			if once(c, 3) {
				if _, present := attr(c, "xyz"); !present {
					p.errAttr(c, "xyz", cf+"@xyz", "an <axis> needs an xyz attribute (three numbers)")
					good = false
					break
				}
				a, ok := p.vec3(c, "xyz", cf, [3]float64{})
				if !ok {
					good = false
					break
				}
				n := math.Sqrt(a[0]*a[0] + a[1]*a[1] + a[2]*a[2])
				if !(n > 1e-9) {
					p.errAttr(c, "xyz", cf+"@xyz", "the axis is zero: give a direction such as \"0 0 1\"")
					good = false
					break
				}
				j.Axis = [3]float64{a[0] / n, a[1] / n, a[2] / n}
			}
		case c.name.Local == "limit":
			if once(c, 4) {
				limitEl = c
				var ok1, ok2, ok3, ok4 bool
				lower, ok1 = p.number(c, "lower", cf, 0)
				upper, ok2 = p.number(c, "upper", cf, 0)
				_, ok3 = p.number(c, "effort", cf, 0)
				_, hasVelocity = attr(c, "velocity")
				velocity, ok4 = p.number(c, "velocity", cf, 0)
				limitNumbersOK = ok1 && ok2 && ok3 && ok4
				good = good && limitNumbersOK
			}
		case c.name.Local == "mimic":
			p.errAt(c.at, cf, "mimic joints are not supported: tautline drives every movable joint on its own; model joint %q as an independent or a fixed joint", name)
			good = false
		case c.name.Local == "dynamics", c.name.Local == "calibration", c.name.Local == "safety_controller":
			// Harmless for kinematics.
		default:
			p.errAt(c.at, cf, "unknown element <%s> inside a joint: tautline reads origin, parent, child, axis and limit (and ignores dynamics, calibration and safety_controller)", c.name.Local)
			good = false
		}
		if err := p.skip(); err != nil {
			return err
		}
	}
	if !seen[1] {
		p.errAt(el.at, field+"/parent", "a joint needs a <parent link=\"…\"/>")
		good = false
	}
	if !seen[2] {
		p.errAt(el.at, field+"/child", "a joint needs a <child link=\"…\"/>")
		good = false
	}
	switch j.Kind {
	case Revolute, Prismatic:
		if !seen[4] {
			p.errAt(el.at, field+"/limit", "a %s joint needs a <limit lower=\"…\" upper=\"…\" velocity=\"…\"/> (the URDF specification requires it)", typ)
			good = false
			break
		}
		if limitNumbersOK && !(lower < upper) {
			p.errAttr(limitEl, "lower", field+"/limit@lower", "lower %v is not below upper %v (a missing lower or upper counts as 0)", lower, upper)
			good = false
		}
		j.Lower, j.Upper = lower, upper
		fallthrough
	case Continuous:
		if !seen[4] {
			break // no velocity limit given: +Inf, the cell file must set one
		}
		if !limitNumbersOK {
			break
		}
		if !hasVelocity {
			p.errAttr(limitEl, "velocity", field+"/limit@velocity", "a <limit> needs a velocity attribute (rad/s or m/s, positive)")
			good = false
		} else if !(velocity > 0) {
			p.errAttr(limitEl, "velocity", field+"/limit@velocity", "velocity %v must be positive", velocity)
			good = false
		} else {
			j.VelocityLimit = velocity
		}
	}
	if good {
		p.u.Joints = append(p.u.Joints, j)
	}
	return nil
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
	p.errs = append(p.errs, &FileError{File: p.file, Line: at.line, Col: at.col, Field: field, Msg: fmt.Sprintf(format, args...)})
}

// errAttr records an error about attribute name of el, at the attribute if
// it is present in the start tag and at the element otherwise.
func (p *urdfParser) errAttr(el xmlElem, name, field, format string, args ...any) {
	at := el.at
	if off := attrOffset(p.data[el.at.off:el.end], name); off >= 0 {
		at.off = el.at.off + int64(off)
		at.line, at.col = lineCol(p.data, at.off)
	}
	p.errAt(at, field, format, args...)
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

// checkTree checks that the joints form one tree over the links.
func (p *urdfParser) checkTree() {
	u := p.u
	links := make(map[string]int, len(u.Links))
	for i, l := range u.Links {
		if k, dup := links[l.Name]; dup {
			p.errAt(xmlPos{line: l.Line, col: l.Col}, "link["+l.Name+"]", "link %q is defined twice (first at line %d)", l.Name, u.Links[k].Line)
			continue
		}
		links[l.Name] = i
	}
	if len(u.Links) == 0 {
		p.errs = append(p.errs, &FileError{File: p.file, Line: 1, Msg: "the robot has no <link>"})
		return
	}
	jointNames := make(map[string]int, len(u.Joints))
	parentOf := make(map[string]int, len(u.Joints)) // child link → joint index
	for i, j := range u.Joints {
		at := xmlPos{line: j.Line, col: j.Col}
		field := "joint[" + j.Name + "]"
		if k, dup := jointNames[j.Name]; dup {
			p.errAt(at, field, "joint %q is defined twice (first at line %d)", j.Name, u.Joints[k].Line)
		} else {
			jointNames[j.Name] = i
		}
		if _, ok := links[j.Parent]; !ok {
			p.errAt(j.parentAt, field+"/parent@link", "no link named %q in this file", j.Parent)
		}
		if _, ok := links[j.Child]; !ok {
			p.errAt(j.childAt, field+"/child@link", "no link named %q in this file", j.Child)
		}
		if j.Parent == j.Child {
			p.errAt(j.childAt, field+"/child@link", "link %q is its own parent: the joints form a loop", j.Child)
			continue
		}
		if k, dup := parentOf[j.Child]; dup {
			p.errAt(j.childAt, field+"/child@link", "link %q already has parent joint %q (line %d): a link has at most one parent, URDF describes a tree", j.Child, u.Joints[k].Name, u.Joints[k].Line)
			continue
		}
		parentOf[j.Child] = i
	}
	if len(p.errs) > 0 {
		return
	}
	var roots []URDFLink
	for _, l := range u.Links {
		if _, has := parentOf[l.Name]; !has {
			roots = append(roots, l)
		}
	}
	if len(roots) > 1 {
		names := make([]string, len(roots))
		for i, r := range roots {
			names[i] = fmt.Sprintf("%q (line %d)", r.Name, r.Line)
		}
		r := roots[1]
		p.errAt(xmlPos{line: r.Line, col: r.Col}, "link["+r.Name+"]", "the robot has %d root links (%s); every link but one must be the child of a joint", len(roots), strings.Join(names, ", "))
		return
	}
	// With at most one parent per link, a link whose parents never reach a
	// link without parent lies on a loop. Report the loop at the joint that
	// closes it in reading order (the one furthest down the file).
	for _, j := range u.Joints {
		link, steps := j.Child, 0
		for {
			k, has := parentOf[link]
			if !has {
				break
			}
			link = u.Joints[k].Parent
			if steps++; steps <= len(u.Joints) {
				continue
			}
			// link is on the loop now: go round it once.
			last, names := k, []string{}
			for l := link; ; {
				m := parentOf[l]
				names = append(names, strconv.Quote(l))
				if u.Joints[m].Line > u.Joints[last].Line {
					last = m
				}
				if l = u.Joints[m].Parent; l == link {
					break
				}
			}
			c := u.Joints[last]
			p.errAt(c.childAt, "joint["+c.Name+"]/child@link", "the joints form a loop through links %s: URDF describes a tree", strings.Join(names, ", "))
			return
		}
	}
}
