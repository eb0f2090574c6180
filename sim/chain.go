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

// ChainWorkspace holds the frames of one Forward evaluation of a Chain. Make
// it with Chain.NewWorkspace; use it from one goroutine at a time. Point,
// PointJacobian and the accessors read the configuration of the last Forward
// call and panic if there was none.
type ChainWorkspace struct {
	chain  *Chain
	axis   [][3]float64 // joint axes, world frame, unit
	origin [][3]float64 // joint frame origins (a point on each axis), world frame, m
	moved  []Pose       // each joint's frame after its motion, in the world
	tip    Pose         // tip link frame in the world
	ready  bool
}

// NewWorkspace returns a workspace sized for c.
func (c *Chain) NewWorkspace() *ChainWorkspace {
	n := len(c.joints)
	return &ChainWorkspace{
		chain:  c,
		axis:   make([][3]float64, n),
		origin: make([][3]float64, n),
		moved:  make([]Pose, n),
	}
}

// Forward computes every joint frame and the tip pose for joint vector q
// (rad or m, base to tip, len NumJoints) with the chain's base link placed
// at base in the world, stores them in ws and returns the tip pose (tip link
// frame → world). Joint limits are not checked. It allocates nothing.
func (c *Chain) Forward(ws *ChainWorkspace, base Pose, q []float64) Pose {
	if ws.chain != c {
		panic("sim: Chain.Forward: workspace belongs to another chain")
	}
	if len(q) != len(c.joints) {
		panic(fmt.Sprintf("sim: Chain.Forward: len(q) = %d, chain has %d joints", len(q), len(c.joints)))
	}
	frame := &base // the previous joint's moved frame, world
	for i := range c.joints {
		j := &c.joints[i]
		var f Pose // this joint's frame at zero position, world
		poseMulTo(&f, frame, &j.Origin)
		w := rotApply(&f.R, j.Axis)
		ws.axis[i] = w
		ws.origin[i] = f.P
		m := &ws.moved[i]
		if j.Kind == Prismatic {
			m.R = f.R
			m.P = [3]float64{f.P[0] + q[i]*w[0], f.P[1] + q[i]*w[1], f.P[2] + q[i]*w[2]}
		} else {
			r := AxisAngle(j.Axis, q[i])
			m.R = rotMul(&f.R, &r)
			m.P = f.P
		}
		frame = m
	}
	poseMulTo(&ws.tip, frame, &c.tip)
	ws.ready = true
	return ws.tip
}

func (ws *ChainWorkspace) mustBeReady() {
	if !ws.ready {
		panic("sim: ChainWorkspace used before Chain.Forward")
	}
}

// Tip returns the tip link's pose in the world from the last Forward.
func (ws *ChainWorkspace) Tip() Pose { ws.mustBeReady(); return ws.tip }

// JointAxis returns joint i's unit axis in the world from the last Forward.
func (ws *ChainWorkspace) JointAxis(i int) [3]float64 { ws.mustBeReady(); return ws.axis[i] }

// JointOrigin returns the origin of joint i's frame (a point on its axis) in
// the world, m, from the last Forward.
func (ws *ChainWorkspace) JointOrigin(i int) [3]float64 { ws.mustBeReady(); return ws.origin[i] }

// JointFrame returns joint i's frame after its motion (its child link's
// frame) in the world, from the last Forward.
func (ws *ChainWorkspace) JointFrame(i int) Pose { ws.mustBeReady(); return ws.moved[i] }

// Point returns the world position (m) of the point pTip, fixed in the tip
// link frame (m), after the last Forward.
func (ws *ChainWorkspace) Point(pTip [3]float64) [3]float64 {
	ws.mustBeReady()
	return ws.tip.Apply(pTip)
}

// PointJacobian writes ∂p/∂q, the 3×n position Jacobian of the point pTip
// fixed in the tip frame, row-major into dst (len 3·n, n = NumJoints), at
// the configuration of the last Forward. Column i is ωᵢ×(p − pᵢ) for a
// revolute or continuous joint and ωᵢ for a prismatic one, with ωᵢ the
// joint's world axis and pᵢ a point on it. It allocates nothing.
func (ws *ChainWorkspace) PointJacobian(dst []float64, pTip [3]float64) {
	n := len(ws.axis)
	if len(dst) != 3*n {
		panic(fmt.Sprintf("sim: PointJacobian: len(dst) = %d, want 3·%d", len(dst), n))
	}
	ws.PointJacobianStrided(dst, n, pTip)
}

// PointJacobianStrided is PointJacobian writing row r, column i to
// dst[r·stride+i], so the 3×n block can land inside a wider row-major matrix
// (pass the slice starting at the block's first element and the matrix's
// row stride). It panics if stride < n or dst is too short.
func (ws *ChainWorkspace) PointJacobianStrided(dst []float64, stride int, pTip [3]float64) {
	ws.mustBeReady()
	n := len(ws.axis)
	if stride < n || len(dst) < 2*stride+n {
		panic(fmt.Sprintf("sim: PointJacobianStrided: stride %d and len(dst) %d cannot hold 3×%d", stride, len(dst), n))
	}
	p := ws.tip.Apply(pTip)
	for i := 0; i < n; i++ {
		w := ws.axis[i]
		var col [3]float64
		if ws.chain.joints[i].Kind == Prismatic {
			col = w
		} else {
			o := ws.origin[i]
			col = kinCross(w, [3]float64{p[0] - o[0], p[1] - o[1], p[2] - o[2]})
		}
		dst[i] = col[0]
		dst[stride+i] = col[1]
		dst[2*stride+i] = col[2]
	}
}
