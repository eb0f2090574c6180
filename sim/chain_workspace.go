package sim

import "fmt"

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
// frame → world). Joint limits are not checked; a NaN in q gives NaN
// frames. It allocates nothing.
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
