package sim

import (
	"fmt"
	"strconv"
	"strings"
)

// JointKind says how a joint moves.
type JointKind int

const (
	// Fixed joints do not move. They appear in URDF values only; a Chain
	// folds them into the constant transforms of its movable joints.
	Fixed JointKind = iota
	// Revolute joints rotate about their axis within position limits (rad).
	Revolute
	// Continuous joints rotate about their axis without position limits.
	Continuous
	// Prismatic joints slide along their axis within position limits (m).
	Prismatic
	// Floating and Planar joints appear in URDF values only; Chain refuses
	// them (an arm joint moves along or about one axis).
	Floating
	Planar
)

// String returns the URDF name of the kind.
func (k JointKind) String() string {
	switch k {
	case Fixed:
		return "fixed"
	case Revolute:
		return "revolute"
	case Continuous:
		return "continuous"
	case Prismatic:
		return "prismatic"
	case Floating:
		return "floating"
	case Planar:
		return "planar"
	}
	return fmt.Sprintf("JointKind(%d)", int(k))
}

// Rotates reports whether the joint's position is an angle (rad) rather
// than a length (m).
func (k JointKind) Rotates() bool { return k == Revolute || k == Continuous }

// ChainJoint is one movable joint of a Chain.
type ChainJoint struct {
	Name string
	Kind JointKind // Revolute, Continuous or Prismatic
	// Axis is the unit joint axis in the joint frame.
	Axis [3]float64
	// Origin maps this joint's frame at zero position to the frame of the
	// previous movable joint after its motion (or to the chain's base link
	// frame for the first joint); fixed joints in between are folded in.
	Origin Pose
	// Lower and Upper are the position limits: rad for revolute joints, m
	// for prismatic joints, −Inf and +Inf for continuous joints.
	Lower, Upper float64
	// VelocityLimit is the largest speed (rad/s or m/s); +Inf when the URDF
	// gives none, which the cell file must then supply.
	VelocityLimit float64
	// Parent and Child are the URDF link names the joint connects.
	Parent, Child string
}

// Chain is a serial arm: the movable joints on the path from a base link to
// a tip link of a URDF, in order from base to tip, with the fixed joints
// folded into constant transforms. A Chain never changes after Chain made
// it; several goroutines may share it, each with its own ChainWorkspace.
type Chain struct {
	Robot    string // URDF robot name
	BaseLink string
	TipLink  string

	joints []ChainJoint
	tip    Pose // tip link frame in the last movable joint's moved frame
}

// Chain returns the serial chain from link base to link tip. tip must lie
// below base in the tree (reachable through parent→child joints) and at
// least one movable joint must lie between them.
//
// Problems are returned as a *FileError naming the URDF file and, where the
// link exists, its line.
func (u *URDF) Chain(base, tip string) (*Chain, error) {
	links := make(map[string]URDFLink, len(u.Links))
	for _, l := range u.Links {
		links[l.Name] = l
	}
	parentOf := make(map[string]int, len(u.Joints))
	for i, j := range u.Joints {
		parentOf[j.Child] = i
	}
	linkErr := func(name, format string, args ...any) error {
		l := links[name]
		return &FileError{File: u.File, Line: l.Line, Col: l.Col, Field: "link[" + name + "]", Msg: fmt.Sprintf(format, args...)}
	}
	for _, name := range []string{base, tip} {
		if _, ok := links[name]; !ok {
			return nil, &FileError{File: u.File, Field: "link[" + name + "]",
				Msg: fmt.Sprintf("no link named %q; the links are %s", name, linkNames(u.Links))}
		}
	}
	if base == tip {
		return nil, linkErr(tip, "base and tip are the same link %q: a chain needs at least one movable joint between them", tip)
	}

	// Walk up from the tip to the base.
	var path []int // joint indices, tip→base
	for link := tip; link != base; {
		k, ok := parentOf[link]
		if !ok {
			return nil, linkErr(tip, "link %q is not below base link %q: the path up from it ends at root link %q", tip, base, link)
		}
		path = append(path, k)
		if len(path) > len(u.Joints) {
			return nil, linkErr(tip, "the joints above link %q form a loop", tip)
		}
		link = u.Joints[k].Parent
	}

	for i := len(path) - 1; i >= 0; i-- {
		j := &u.Joints[path[i]]
		var refuse FileError
		switch {
		case j.unsupported != nil:
			refuse = *j.unsupported
		case j.Kind == Floating || j.Kind == Planar:
			refuse = FileError{File: u.File, Line: j.Line, Col: j.Col, Field: "joint[" + j.Name + "]@type",
				Msg: fmt.Sprintf("type %q is not supported on an arm", j.Kind)}
		case j.Mimic != "":
			refuse = FileError{File: u.File, Line: j.Line, Col: j.Col, Field: "joint[" + j.Name + "]/mimic",
				Msg: "mimic joints are not supported"}
		case j.Kind < Fixed || j.Kind > Prismatic:
			refuse = FileError{File: u.File, Line: j.Line, Col: j.Col, Field: "joint[" + j.Name + "]@type",
				Msg: fmt.Sprintf("unknown joint kind %v", j.Kind)}
		default:
			continue
		}
		refuse.Msg += fmt.Sprintf(" (joint %q lies on the chain from %q to %q)", j.Name, base, tip)
		return nil, &refuse
	}

	c := &Chain{Robot: u.Name, BaseLink: base, TipLink: tip}
	acc := Identity()
	for i := len(path) - 1; i >= 0; i-- {
		j := u.Joints[path[i]]
		acc = acc.Mul(j.Origin)
		if j.Kind == Fixed {
			continue
		}
		c.joints = append(c.joints, ChainJoint{
			Name:          j.Name,
			Kind:          j.Kind,
			Axis:          j.Axis,
			Origin:        acc,
			Lower:         j.Lower,
			Upper:         j.Upper,
			VelocityLimit: j.VelocityLimit,
			Parent:        j.Parent,
			Child:         j.Child,
		})
		acc = Identity()
	}
	c.tip = acc
	if len(c.joints) == 0 {
		return nil, linkErr(tip, "every joint between %q and %q is fixed: a chain needs at least one movable joint", base, tip)
	}
	return c, nil
}

func linkNames(ls []URDFLink) string {
	names := make([]string, len(ls))
	for i, l := range ls {
		names[i] = strconv.Quote(l.Name)
	}
	return strings.Join(names, ", ")
}

// NumJoints returns the number of movable joints.
func (c *Chain) NumJoints() int { return len(c.joints) }

// Joints returns a copy of the movable joints, base to tip.
func (c *Chain) Joints() []ChainJoint { return append([]ChainJoint(nil), c.joints...) }

// Joint returns movable joint i (0 at the base).
func (c *Chain) Joint(i int) ChainJoint { return c.joints[i] }

// JointIndex returns the index of the movable joint with the given name, or
// -1.
func (c *Chain) JointIndex(name string) int {
	for i, j := range c.joints {
		if j.Name == name {
			return i
		}
	}
	return -1
}

// TipOffset returns the constant pose of the tip link in the frame of the
// last movable joint after its motion (the fixed joints after it, folded).
func (c *Chain) TipOffset() Pose { return c.tip }
