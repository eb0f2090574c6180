package sim

import (
	"bytes"
	"encoding/xml"
	"errors"
	"io"
	"math"
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
//   - <joint name="…" type="…"> with type revolute, continuous, prismatic,
//     fixed, floating or planar. Its children: <origin xyz="…" rpy="…"/>
//     (both default to zero), <parent link="…"/> and <child link="…"/> (both
//     required), <axis xyz="…"/> (defaults to 1 0 0, normalised, a zero axis
//     is refused), <limit lower="…" upper="…" velocity="…" effort="…"/>
//     (required for revolute and prismatic joints; lower and upper default
//     to 0 and must satisfy lower < upper; velocity is required and
//     positive), <mimic joint="…"/>; <dynamics>, <calibration> and
//     <safety_controller> are ignored; anything else inside a joint is
//     refused.
//   - The joints form one tree: every joint names existing links, a link has
//     at most one parent joint, there is exactly one root link and no loop.
//
// Floating, planar and mimic joints are valid URDF that tautline cannot
// drive (a floating or planar joint has no single axis; a mimic joint moves
// with another instead of on its own). They are kept in the tree so that,
// say, a gripper on a side branch does not spoil the file, and Chain refuses
// them with their position if they lie on the requested chain.
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
	Name string
	// Kind is the joint type. Floating and Planar joints are kept so the
	// tree stays whole; Chain refuses them on its path.
	Kind   JointKind
	Parent string // parent link name
	Child  string // child link name

	// Origin maps the joint frame (at zero joint position) to the parent
	// link's frame: <origin xyz rpy>.
	Origin Pose
	// Axis is the joint axis in the joint frame, unit length (the plane's
	// normal for a planar joint). Meaningless for fixed and floating joints.
	Axis [3]float64
	// Lower and Upper are the position limits: rad for revolute joints, m for
	// prismatic joints, −Inf and +Inf for the other kinds.
	Lower, Upper float64
	// VelocityLimit is the largest speed, rad/s or m/s; +Inf when the file
	// gives none (never for revolute and prismatic joints).
	VelocityLimit float64

	// Mimic names the joint this one follows (<mimic joint="…"/>), or is
	// empty. Chain refuses a mimic joint on its path.
	Mimic string

	Line, Col int // position of the <joint> element in the file

	parentAt, childAt xmlPos // positions of the <parent> and <child> elements
	// unsupported, if set, is why Chain must refuse this joint (floating,
	// planar or mimic), positioned at the element that says so.
	unsupported *FileError
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
		j.Kind = Floating
		if typ == "planar" {
			j.Kind = Planar
		}
		j.unsupported = p.newErr(p.attrPos(el, "type"), field+"@type", "type %q is not supported on an arm: an arm joint moves along or about one axis; tautline drives revolute, continuous and prismatic joints", typ)
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
			mimicked, has := attr(c, "joint")
			if !has || mimicked == "" {
				p.errAttr(c, "joint", cf+"@joint", "a <mimic> needs a non-empty joint attribute")
				good = false
				break
			}
			j.Mimic = mimicked
			if j.unsupported == nil {
				j.unsupported = p.newErr(c.at, cf, "mimic joints are not supported: tautline drives every movable joint on its own; model joint %q as an independent or a fixed joint", name)
			}
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
