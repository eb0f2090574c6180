package mpc

import (
	"math"
	"math/rand/v2"

	"gonum.org/v1/gonum/mat"

	"tautline/sim"
)

// linearProcess is an exactly linear mass-spring figure stepped with
// backward Euler in position form, built for the checks against the
// textbook Kalman filter. Nodes carry masses M, springs give a symmetric
// stiffness K (between nodes and to anchors), dampers a symmetric C; the
// anchors sit at E·q for joints q and pull through Ka. The step solves
//
//	(M/h² + C/h + K)·x⁺ = M/h²·(2x − x₋) + C/h·x + Ka·E·q⁺ + f_g,
//
// so x⁺ = A·x + B·x₋ + u(q⁺) with A = H⁻¹(2M/h² + C/h), B = −H⁻¹M/h².
// Node 0 is anchored (held where it starts).
type linearProcess struct {
	d, nj     int
	h         float64
	fixed     []bool
	fixedPos  []float64
	hInv      *mat.Dense // H⁻¹ on the free coordinates embedded in D×D (zero rows/cols for fixed)
	a, b      *mat.Dense
	k         *mat.Dense
	drive     *mat.Dense // Ka·E, D × nj
	gravityN  []float64
	rhs, tmp  []float64
	mass      []float64
	c         *mat.Dense
	lastValid bool
}

func newLinearProcess(rng *rand.Rand, nodes, nj int, h float64) *linearProcess {
	d := 3 * nodes
	p := &linearProcess{d: d, nj: nj, h: h, fixed: make([]bool, d), fixedPos: make([]float64, d),
		gravityN: make([]float64, d), rhs: make([]float64, d), tmp: make([]float64, d), mass: make([]float64, d)}
	for i := 0; i < 3; i++ {
		p.fixed[i] = true
	}
	// Nodes hang in a row along x; node 0 is anchored at the origin.
	for i := 0; i < nodes; i++ {
		p.fixedPos[3*i] = 0.1 * float64(i)
	}
	k := mat.NewDense(d, d, nil)
	c := mat.NewDense(d, d, nil)
	// A 3-D spring between nodes i and j with stiffness k·(u uᵀ) + kt·(I − u uᵀ)
	// adds the 3×3 block S to (i,i), (j,j) and −S to (i,j), (j,i).
	addSpring := func(m *mat.Dense, i, j int, s *mat.Dense) {
		for r := 0; r < 3; r++ {
			for cc := 0; cc < 3; cc++ {
				v := s.At(r, cc)
				m.Set(3*i+r, 3*i+cc, m.At(3*i+r, 3*i+cc)+v)
				if j >= 0 {
					m.Set(3*j+r, 3*j+cc, m.At(3*j+r, 3*j+cc)+v)
					m.Set(3*i+r, 3*j+cc, m.At(3*i+r, 3*j+cc)-v)
					m.Set(3*j+r, 3*i+cc, m.At(3*j+r, 3*i+cc)-v)
				}
			}
		}
	}
	springBlock := func(kAx, kT float64) *mat.Dense {
		u := []float64{rng.NormFloat64(), rng.NormFloat64(), rng.NormFloat64()}
		nu := math.Sqrt(u[0]*u[0] + u[1]*u[1] + u[2]*u[2])
		s := mat.NewDense(3, 3, nil)
		for r := 0; r < 3; r++ {
			for cc := 0; cc < 3; cc++ {
				uu := u[r] * u[cc] / (nu * nu)
				id := 0.0
				if r == cc {
					id = 1
				}
				s.Set(r, cc, kAx*uu+kT*(id-uu))
			}
		}
		return s
	}
	for i := 1; i < nodes; i++ {
		addSpring(k, i, i-1, springBlock(400+200*rng.Float64(), 50))
		addSpring(c, i, i-1, springBlock(0.5, 0.05))
		p.mass[3*i], p.mass[3*i+1], p.mass[3*i+2] = 0.05+0.05*rng.Float64(), 0, 0
		p.mass[3*i+1], p.mass[3*i+2] = p.mass[3*i], p.mass[3*i]
		p.gravityN[3*i+2] = -sim.StandardGravityMPerS2 * p.mass[3*i]
	}
	// Every joint moves one anchor point; the anchors pull on the last two nodes.
	p.drive = mat.NewDense(d, nj, nil)
	for j := 0; j < nj; j++ {
		node := nodes - 1 - j%2
		s := springBlock(300, 30)
		addSpring(k, node, -1, s)
		for r := 0; r < 3; r++ {
			p.drive.Set(3*node+r, j, s.At(r, j%3)*0.5)
		}
	}
	// Restrict everything to the free coordinates.
	free := []int{}
	for i := 0; i < d; i++ {
		if !p.fixed[i] {
			free = append(free, i)
		}
	}
	nf := len(free)
	hm := mat.NewDense(nf, nf, nil)
	for a, i := range free {
		for bb, j := range free {
			v := k.At(i, j) + c.At(i, j)/h
			if i == j {
				v += p.mass[i] / (h * h)
			}
			hm.Set(a, bb, v)
		}
	}
	var hinv mat.Dense
	if err := hinv.Inverse(hm); err != nil {
		panic(err)
	}
	p.hInv = mat.NewDense(d, d, nil)
	for a, i := range free {
		for bb, j := range free {
			p.hInv.Set(i, j, hinv.At(a, bb))
		}
	}
	// A = H⁻¹(2M/h² + C/h), B = −H⁻¹ M/h² (free rows only).
	rhsA := mat.NewDense(d, d, nil)
	rhsB := mat.NewDense(d, d, nil)
	for _, i := range free {
		rhsA.Set(i, i, 2*p.mass[i]/(h*h))
		rhsB.Set(i, i, -p.mass[i]/(h*h))
		for _, j := range free {
			rhsA.Set(i, j, rhsA.At(i, j)+c.At(i, j)/h)
		}
	}
	p.a = mat.NewDense(d, d, nil)
	p.a.Mul(p.hInv, rhsA)
	p.b = mat.NewDense(d, d, nil)
	p.b.Mul(p.hInv, rhsB)
	p.k, p.c = k, c
	return p
}

func (p *linearProcess) Dim() int         { return p.d }
func (p *linearProcess) NumJoints() int   { return p.nj }
func (p *linearProcess) StepS() float64   { return p.h }
func (p *linearProcess) Fixed(i int) bool { return p.fixed[i] }

// inputTo writes u(q) = H⁻¹(Ka·E·q + f_g) (free rows) plus the fixed positions.
func (p *linearProcess) inputTo(dst, q []float64) {
	for i := range p.rhs {
		p.rhs[i] = p.gravityN[i]
		for j, qj := range q {
			p.rhs[i] += p.drive.At(i, j) * qj
		}
	}
	mulVec(dst, p.hInv, p.rhs)
	for i := range dst {
		if p.fixed[i] {
			dst[i] = p.fixedPos[i]
		}
	}
}

func mulVec(dst []float64, m *mat.Dense, v []float64) {
	r, c := m.Dims()
	for i := 0; i < r; i++ {
		s := 0.0
		for j := 0; j < c; j++ {
			s += m.At(i, j) * v[j]
		}
		dst[i] = s
	}
}

func (p *linearProcess) Step(xNext, xCur, xPrev, q []float64) error {
	p.inputTo(xNext, q)
	mulVec(p.tmp, p.a, xCur)
	for i := range xNext {
		xNext[i] += p.tmp[i]
	}
	mulVec(p.tmp, p.b, xPrev)
	for i := range xNext {
		xNext[i] += p.tmp[i]
	}
	p.lastValid = true
	return nil
}

func (p *linearProcess) TangentTo(dst, dCur, dPrev *mat.Dense) {
	if !p.lastValid {
		panic("no step")
	}
	var bd mat.Dense
	dst.Mul(p.a, dCur)
	bd.Mul(p.b, dPrev)
	dst.Add(dst, &bd)
}

// RestPoseTo solves K·x = Ka·E·q + f_g on the free coordinates.
func (p *linearProcess) RestPoseTo(dst, q []float64) error {
	free := []int{}
	for i := 0; i < p.d; i++ {
		if !p.fixed[i] {
			free = append(free, i)
		}
	}
	nf := len(free)
	km := mat.NewDense(nf, nf, nil)
	rhs := mat.NewVecDense(nf, nil)
	for a, i := range free {
		v := p.gravityN[i]
		for j, qj := range q {
			v += p.drive.At(i, j) * qj
		}
		for bb, j := range free {
			km.Set(a, bb, p.k.At(i, j))
		}
		for j := 0; j < p.d; j++ {
			if p.fixed[j] {
				v -= p.k.At(i, j) * p.fixedPos[j]
			}
		}
		rhs.SetVec(a, v)
	}
	var x mat.VecDense
	if err := x.SolveVec(km, rhs); err != nil {
		return err
	}
	copy(dst, p.fixedPos)
	for a, i := range free {
		dst[i] = x.AtVec(a)
	}
	return nil
}
