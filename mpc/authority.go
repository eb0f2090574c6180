package mpc

import (
	"fmt"
	"math"
	"sort"

	"gonum.org/v1/gonum/mat"

	"tautline/sim"
)

// AuthoritySettings configures CueAuthority. The zero value means the
// documented defaults.
type AuthoritySettings struct {
	// Planner gives the horizon (its length is the window) and the
	// correction knots whose effect is measured; zero fields as for
	// NewPlanner.
	Planner PlannerSettings
	// StrideS is the distance between window starts. 0: half a window.
	StrideS float64
}

// AuthorityWindow is the planner's authority over one window of the cue.
type AuthorityWindow struct {
	StartS, EndS float64
	// MinSingular and MaxSingular are the extreme singular values of the
	// sensitivity of every marker at every step of the window to the
	// planner's joint corrections (its knots), m per rad (m per m for
	// prismatic joints), over the corrections that move the string
	// anchors: combinations that leave every anchor where it is (a wrist
	// singularity, a joint that turns a bar about its own points) are
	// redundancy, not a lack of authority, and are left out. A small
	// MinSingular means some motion of the anchors the arms can make
	// barely moves the markers: feedback cannot act there.
	MinSingular, MaxSingular float64
	// AnchorRank is the number of independent anchor motions the knots
	// can make over the window (at most knots × joints).
	AnchorRank int
	// WeakestJoint names the joint with the largest share of the weakest
	// correction direction.
	WeakestJoint string
}

// CueAuthority slides a window of the planner's horizon along the cue from
// startS to endS and returns, for each window, the singular values of the
// markers' sensitivity to joint corrections, linearised about the nominal
// motion nom, sorted weakest first (smallest MinSingular first).
func CueAuthority(cell *sim.Cell, sched JointSchedule, nom *Nominal, startS, endS float64, s AuthoritySettings) ([]AuthorityWindow, error) {
	set := s.Planner
	set.MaxIterations = 1
	pl, err := NewPlanner(cell, sched, nom, set)
	if err != nil {
		return nil, err
	}
	window := float64(pl.steps) * pl.hp
	stride := s.StrideS
	if stride == 0 {
		stride = window / 2
	}
	if !(stride > 0) || math.IsInf(stride, 0) {
		return nil, fmt.Errorf("mpc: authority stride %v s must be positive", stride)
	}
	if !(endS >= startS) {
		return nil, fmt.Errorf("mpc: authority span [%v, %v] s is empty", startS, endS)
	}
	nq, dim := pl.nq, pl.dim
	q := make([]float64, nq)
	qPrev := make([]float64, nq)
	x := make([]float64, dim)
	xPrev := make([]float64, dim)
	rows := pl.steps * pl.nm3
	sens := mat.NewDense(rows, pl.nc, nil)
	anch := mat.NewDense(max(pl.steps*pl.na3, 1), pl.nc, nil)
	var svd, asvd mat.SVD
	var va, basis, restricted, v, dir mat.Dense
	var out []AuthorityWindow
	for t := startS; t <= endS-window+1e-9 || len(out) == 0; t += stride {
		sched.PositionTo(q, t)
		sched.PositionTo(qPrev, t-pl.tickS)
		nom.StateTo(x, t)
		nom.StateTo(xPrev, t-pl.tickS)
		pl.st.have = false
		if err := pl.Prepare(t, q, qPrev, x, xPrev, nil); err != nil {
			return nil, fmt.Errorf("mpc: authority at %.3f s: %w", t, err)
		}
		jf := pl.lz.jfig.RawMatrix()
		for k := range pl.steps {
			w := pl.lz.rowW[k]
			for r := range pl.nm3 {
				row := k*pl.nm3 + r
				for c := range pl.nc {
					sens.Set(row, c, jf.Data[row*jf.Stride+c]/w)
				}
			}
		}
		// The knot directions that move the anchors: the right singular
		// vectors of the stacked anchor sensitivity with singular values
		// above 1e-6 of the largest (a joint motion of 1 rad that moves
		// the anchors by less than a micrometre per metre of the best
		// direction is treated as redundancy; common practice for a
		// numerical rank, cf. Golub & Van Loan, §5.4.1).
		for k := range pl.steps {
			for r := range pl.na3 {
				for c := range pl.nc {
					anch.Set(k*pl.na3+r, c, pl.lz.dA[k].At(r, c))
				}
			}
		}
		if !asvd.Factorize(anch, mat.SVDFull) {
			return nil, fmt.Errorf("mpc: authority at %.3f s: singular value decomposition failed", t)
		}
		av := asvd.Values(nil)
		rank := 0
		for _, sv := range av {
			if sv > 1e-6*av[0] {
				rank++
			}
		}
		if rank == 0 {
			return nil, fmt.Errorf("mpc: authority at %.3f s: the joints do not move any string anchor", t)
		}
		asvd.VTo(&va)
		basis.Reset()
		basis.CloneFrom(va.Slice(0, pl.nc, 0, rank))
		restricted.Reset()
		restricted.Mul(sens, &basis)
		if !svd.Factorize(&restricted, mat.SVDThin) {
			return nil, fmt.Errorf("mpc: authority at %.3f s: singular value decomposition failed", t)
		}
		values := svd.Values(nil)
		v.Reset()
		svd.VTo(&v)
		last := len(values) - 1
		dir.Reset()
		dir.Mul(&basis, v.Slice(0, rank, last, last+1))
		weakest, share := 0, -1.0
		for c := range pl.nc {
			if a := math.Abs(dir.At(c, 0)); a > share {
				weakest, share = c%nq, a
			}
		}
		out = append(out, AuthorityWindow{
			StartS: t, EndS: t + window,
			MinSingular: values[last], MaxSingular: values[0],
			AnchorRank:   rank,
			WeakestJoint: cell.JointNames()[weakest],
		})
	}
	sort.SliceStable(out, func(i, j int) bool { return out[i].MinSingular < out[j].MinSingular })
	return out, nil
}
