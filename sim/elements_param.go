package sim

import "fmt"

// ParamKind names a kind of model parameter whose effect on a step can be
// differentiated (for fitting a model to recorded motion).
type ParamKind int

// The parameter kinds; Param.Index says which string, node or rod.
const (
	StringRestLength ParamKind = iota // metres; Index: string
	StringStiffness                   // N/m; Index: string
	NodeMass                          // kg; Index: node
	NodeDrag                          // N·s/m; Index: node
	RodRestLength                     // metres; Index: rod
	RodStiffness                      // N/m; Index: rod
	RodDamping                        // N·s/m; Index: rod
)

func (k ParamKind) String() string {
	switch k {
	case StringRestLength:
		return "string rest length"
	case StringStiffness:
		return "string stiffness"
	case NodeMass:
		return "node mass"
	case NodeDrag:
		return "node drag"
	case RodRestLength:
		return "rod rest length"
	case RodStiffness:
		return "rod stiffness"
	case RodDamping:
		return "rod damping"
	}
	return fmt.Sprintf("ParamKind(%d)", int(k))
}

// Param is one scalar parameter of a model.
type Param struct {
	Kind  ParamKind
	Index int
}

// checkParam panics on a parameter the model does not have (shape misuse).
func (m *Model) checkParam(p Param) {
	var n int
	switch p.Kind {
	case StringRestLength, StringStiffness:
		n = len(m.strs)
	case NodeMass, NodeDrag:
		n = m.nNodes
	case RodRestLength, RodStiffness, RodDamping:
		n = len(m.rods)
	default:
		panic("sim: unknown parameter kind " + p.Kind.String())
	}
	if p.Index < 0 || p.Index >= n {
		panic(fmt.Sprintf("sim: %v %d does not exist", p.Kind, p.Index))
	}
}

// paramGrad adds ∂G/∂θ for parameter p, at the solution x of a step with
// inputs in, into dst (band order, one column of a 3·free × k matrix:
// entry r at dst[r*k]). From the element terms of incremental:
//
//	string rest length L:  −κ·u at its node        (G += T(l − L)·u)
//	string stiffness k:    (T/k)·u                  (φ is k times a function of e)
//	node mass m:           (x − y)/h² + g·ẑ         (inertia and weight)
//	node drag c:           (x − x_t)/h
//	rod rest length L:     ∓k·û at a, b             (G_a += k(l − L)·û)
//	rod stiffness k:       ±(l − L)·û
//	rod damping c:         ±s·û_t/h                 (s = (d − d_t)·û_t)
func (m *Model) paramGrad(dst []float64, k int, x []float64, in *stepInputs, p Param) {
	put := func(node int, sign float64, v [3]float64) {
		pos := m.slot[node]
		if pos < 0 {
			return
		}
		for q := range 3 {
			dst[(3*pos+q)*k] += sign * v[q]
		}
	}
	scaled := func(a float64, v [3]float64) [3]float64 { return [3]float64{a * v[0], a * v[1], a * v[2]} }
	switch p.Kind {
	case StringRestLength, StringStiffness:
		st := &m.strs[p.Index]
		n := st.Node
		a := in.anchors[3*p.Index : 3*p.Index+3]
		u, l := unitOf([3]float64{x[3*n] - a[0], x[3*n+1] - a[1], x[3*n+2] - a[2]})
		_, t, kappa := stringRamp(l-st.RestLengthM, st.StiffnessNPerM, m.slackW)
		if p.Kind == StringRestLength {
			put(n, -1, scaled(kappa, u))
		} else {
			put(n, 1, scaled(t/st.StiffnessNPerM, u))
		}
	case NodeMass, NodeDrag:
		i := p.Index
		var v [3]float64
		for q := range 3 {
			if p.Kind == NodeMass {
				v[q] = (x[3*i+q] - in.y[3*i+q]) / (m.h * m.h)
			} else {
				v[q] = (x[3*i+q] - in.xc[3*i+q]) / m.h
			}
		}
		if p.Kind == NodeMass {
			v[2] += m.gravity
		}
		put(i, 1, v)
	case RodRestLength, RodStiffness, RodDamping:
		r := &m.rods[p.Index]
		d := m.nodeDiff(x, r.a, r.b)
		u, l := unitOf(d)
		var v [3]float64
		switch p.Kind {
		case RodRestLength:
			v = scaled(-r.k, u)
		case RodStiffness:
			v = scaled(l-r.restLen, u)
		case RodDamping:
			fr := in.frames[4*p.Index : 4*p.Index+4]
			if fr[3] > 0 {
				dt := m.nodeDiff(in.xc, r.a, r.b)
				ut := [3]float64{fr[0], fr[1], fr[2]}
				s := (d[0]-dt[0])*ut[0] + (d[1]-dt[1])*ut[1] + (d[2]-dt[2])*ut[2]
				v = scaled(s/m.h, ut)
			}
		}
		put(r.a, 1, v)
		put(r.b, -1, v)
	}
}
