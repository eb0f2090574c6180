package mpc

import "math"

// SetMarkerOffset sets the marker offset the planner cancels from the next
// Prepare on: offsetM (world frame, m, three per marker in the cell's
// marker order) is where each marker is observed to sit relative to its
// node in the planner's model, the estimator's marker offsets
// (Estimator.MarkerOffsetTo). The tracking residual of step k becomes
// p(x_k) + offset − r_k, that is, the reference shifted by −offset, so a
// static mismatch between the model and the figure (strings a few percent
// long) is corrected instead of being predicted away (offset-free
// tracking with an output disturbance model; see the estimator's Marker
// offsets). The terminal displacement term is unchanged: a constant offset
// cancels in it. The offset holds until set again; nil clears it. It
// panics if offsetM is not nil and its length is not 3·markers; a
// non-finite entry is treated as zero. The first call allocates; later
// ones do not.
func (p *Planner) SetMarkerOffset(offsetM []float64) {
	if offsetM == nil {
		p.offset = p.offset[:0]
		return
	}
	if len(offsetM) != p.nm3 {
		panic("mpc: Planner.SetMarkerOffset: wrong length")
	}
	if cap(p.offset) < p.nm3 {
		p.offset = make([]float64, p.nm3)
	}
	p.offset = p.offset[:p.nm3]
	for i, v := range offsetM {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			v = 0
		}
		p.offset[i] = v
	}
}

// shiftReference subtracts the marker offset from every r_k of the tick.
func (p *Planner) shiftReference() {
	if len(p.offset) == 0 {
		return
	}
	st := &p.st
	for k := 0; k <= p.steps; k++ {
		r := st.refM[k*p.nm3 : (k+1)*p.nm3]
		for i, v := range p.offset {
			r[i] -= v
		}
	}
}
