package server

// jointHistory keeps the last measured joint vectors with their cue times,
// so the estimator gets the joints at a frame's capture time: an
// observation's joints are measured at its cue time, its tracker frame
// was captured earlier (the tracker's latency), and the estimator steps
// the figure to the frame with the joints of that moment. Passing the
// newer joints instead moves the string anchors ahead of the markers by
// the latency; measured on the demo (20 ms latency, standard profile) that
// raised the closed-loop RMS figure error from 29.4 mm to 32.9 mm.
type jointHistory struct {
	nq     int
	timesS []float64
	joints []float64 // len(timesS) × nq
	head   int       // index of the oldest entry
	count  int
}

// jointHistoryLength is the number of observations kept: 0.32 s at the
// demo's 10 ms tick, far beyond any usable tracker latency.
const jointHistoryLength = 32

func newJointHistory(nq int) jointHistory {
	return jointHistory{nq: nq, timesS: make([]float64, jointHistoryLength), joints: make([]float64, jointHistoryLength*nq)}
}

func (h *jointHistory) clear() { h.head, h.count = 0, 0 }

func (h *jointHistory) entry(i int) (float64, []float64) {
	j := (h.head + i) % len(h.timesS)
	return h.timesS[j], h.joints[j*h.nq : (j+1)*h.nq]
}

// push records joints q measured at cue time tS. A time that does not
// move forward (the controller's clock restarted) starts the history
// afresh.
func (h *jointHistory) push(tS float64, q []float64) {
	if h.count > 0 {
		if last, _ := h.entry(h.count - 1); !(tS > last) {
			h.clear()
		}
	}
	c := len(h.timesS)
	var j int
	if h.count < c {
		j = (h.head + h.count) % c
		h.count++
	} else {
		j = h.head
		h.head = (h.head + 1) % c
	}
	h.timesS[j] = tS
	copy(h.joints[j*h.nq:(j+1)*h.nq], q)
}

// at writes the joints at cue time tS, interpolated linearly between the
// recorded measurements around it and held beyond the oldest and newest.
// With nothing recorded it writes fallback.
func (h *jointHistory) at(dst []float64, tS float64, fallback []float64) {
	if h.count == 0 {
		copy(dst, fallback)
		return
	}
	t0, q0 := h.entry(0)
	if tS <= t0 {
		copy(dst, q0)
		return
	}
	for i := 1; i < h.count; i++ {
		t1, q1 := h.entry(i)
		if tS <= t1 {
			w := (tS - t0) / (t1 - t0)
			for k := range dst {
				dst[k] = q0[k] + w*(q1[k]-q0[k])
			}
			return
		}
		t0, q0 = t1, q1
	}
	copy(dst, q0)
}
