package server

import (
	"math"
	"testing"
	"time"

	"tautline/mpc"
	pb "tautline/proto/tautline/v1"
)

// A live session's status carries the tracking error of the markers the
// controller reported, recomputed here independently from the plant's
// marker positions and the cue's reference at the frame's capture time,
// and the session's fallback, coast and bound counters.
func TestStatusCarriesTrackingErrorAndFallbacks(t *testing.T) {
	h, p, slot := newLiveHost(t)
	if st := h.status(); st.TrackingErrorMarkers != 0 || st.TrackingErrorM != 0 {
		t.Fatalf("before the cue starts: tracking error %v over %d markers, want none", st.TrackingErrorM, st.TrackingErrorMarkers)
	}
	var origin float64
	var last *pb.Observation
	var bounds uint64
	// The demo cue holds the arms still for its first second; 1.6 s takes
	// the figure into motion.
	const ticks = 160
	for i := 0; i < ticks; i++ {
		last = p.observation()
		if i == 0 {
			origin = last.CueTimeS // the first observation after Start is the cue's start
		}
		h.eng.tick(last, time.Now(), slot)
		h.eng.prepareNext()
		if slot.cmd.State != pb.SessionState_SESSION_STATE_LIVE || slot.cmd.Error != nil {
			t.Fatalf("tick %d: state %v, error %v", i, slot.cmd.State, slot.cmd.Error)
		}
		bounds += uint64(len(slot.cmd.BoundsActed))
		p.apply(t, &slot.cmd)
	}
	st := h.status()

	// The independent recomputation: the demo tracker frame is the world
	// frame (see plant), so the sightings are world positions.
	lc := h.eng.armed.lc
	ref := make([]float64, 3*len(h.cell.Markers))
	lc.ref.MarkersTo(ref, last.CaptureTimeS-origin+lc.cue.StartS())
	var sum float64
	for i, m := range last.Markers {
		for k, v := range [3]float64{m.XM, m.YM, m.ZM} {
			d := v - ref[3*i+k]
			sum += d * d
		}
	}
	want := math.Sqrt(sum / float64(len(last.Markers)))
	if int(st.TrackingErrorMarkers) != len(h.cell.Markers) {
		t.Errorf("tracking error over %d markers, want all %d (none occluded or gated)", st.TrackingErrorMarkers, len(h.cell.Markers))
	}
	// 1e-12 m: the same sums in another order; float rounding of squares
	// of millimetre differences is far smaller.
	if math.Abs(st.TrackingErrorM-want) > 1e-12 {
		t.Errorf("tracking error %v m, recomputed %v m", st.TrackingErrorM, want)
	}
	// Plausible: finite and positive (the plant reports its markers as they
	// are now but stamped 20 ms earlier, so a moving figure can never match
	// the reference exactly), and below 5 cm. The demo figure starts at
	// rest where the reference starts and the plant is the model itself, so
	// the error is the figure's motion over the 20 ms stamp offset plus what
	// the correction leaves (about 1 mm measured here, go test -v):
	// centimetres would mean the comparison uses the wrong frame, time or
	// marker order.
	if !(st.TrackingErrorM > 0 && st.TrackingErrorM < 0.05) {
		t.Errorf("tracking error %v m, want finite, > 0 and < 0.05", st.TrackingErrorM)
	}
	t.Logf("tracking error after %d live ticks: %.3g m", ticks, st.TrackingErrorM)

	if st.FallbackTicks != 0 || st.CoastEntries != 0 {
		t.Errorf("clean live run: %d fallback ticks, %d coast entries; want none", st.FallbackTicks, st.CoastEntries)
	}
	if st.BoundActions < bounds || st.LastBoundActions != uint32(len(slot.cmd.BoundsActed)) {
		t.Errorf("bound actions %d (last %d); the live commands carried %d (last %d)",
			st.BoundActions, st.LastBoundActions, bounds, len(slot.cmd.BoundsActed))
	}

	// Hidden markers: the error stays the last measured one, and after the
	// stale count the session coasts, each coast tick a fallback.
	p.hideMarkers = true
	before := st.TrackingErrorM
	for i := 0; i < 200 && h.status().State != pb.SessionState_SESSION_STATE_COAST; i++ {
		h.eng.tick(p.observation(), time.Now(), slot)
		h.eng.prepareNext()
		p.apply(t, &slot.cmd)
	}
	st = h.status()
	if st.State != pb.SessionState_SESSION_STATE_COAST {
		t.Fatalf("no markers for 200 ticks: state %v, want coast", st.State)
	}
	if st.TrackingErrorM != before {
		t.Errorf("tracking error changed to %v with no marker seen (was %v)", st.TrackingErrorM, before)
	}
	if st.CoastEntries != 1 {
		t.Errorf("coast entries %d, want 1", st.CoastEntries)
	}
	fb := st.FallbackTicks
	if fb == 0 {
		t.Errorf("the stale ticks before coast are fallbacks, got none")
	}
	for i := 0; i < 5; i++ {
		h.eng.tick(p.observation(), time.Now(), slot)
		p.apply(t, &slot.cmd)
	}
	if got := h.status().FallbackTicks; got != fb+5 {
		t.Errorf("5 coast ticks: fallback ticks %d, want %d", got, fb+5)
	}
}

// The guard's bound bits map onto the Command's bound kinds: a target
// beyond a position limit is POSITION_LOWER or _UPPER by the direction of
// the adjustment (the viability bit the guard sets with it is not listed
// again), a viability bound alone is VIABILITY, and velocity and
// acceleration bounds are listed as well.
func TestBoundKindsOfTheGuardsBits(t *testing.T) {
	h, _, slot := newLiveHost(t)
	e := h.eng
	clear(e.grep.Acted)
	copy(e.wish, e.prev)
	copy(e.target, e.prev)
	e.grep.Acted[0] = mpc.BoundPosition | mpc.BoundViability
	e.target[0] = e.wish[0] + 0.1 // raised: the lower limit
	e.grep.Acted[1] = mpc.BoundPosition | mpc.BoundViability | mpc.BoundVelocity
	e.target[1] = e.wish[1] - 0.1 // lowered: the upper limit
	e.grep.Acted[2] = mpc.BoundViability
	e.target[2] = e.wish[2] - 0.01
	e.grep.Acted[3] = mpc.BoundAccel
	e.grep.Any = mpc.BoundPosition | mpc.BoundViability | mpc.BoundVelocity | mpc.BoundAccel
	e.fillBounds(slot)
	type jk struct {
		j uint32
		k pb.BoundKind
	}
	want := []jk{
		{0, pb.BoundKind_BOUND_KIND_POSITION_LOWER},
		{1, pb.BoundKind_BOUND_KIND_POSITION_UPPER},
		{1, pb.BoundKind_BOUND_KIND_VELOCITY},
		{2, pb.BoundKind_BOUND_KIND_VIABILITY},
		{3, pb.BoundKind_BOUND_KIND_ACCELERATION},
	}
	got := slot.cmd.BoundsActed
	if len(got) != len(want) {
		t.Fatalf("bounds acted %v, want %v", got, want)
	}
	for i, w := range want {
		if got[i].JointIndex != w.j || got[i].Kind != w.k {
			t.Errorf("bound %d: joint %d %v, want joint %d %v", i, got[i].JointIndex, got[i].Kind, w.j, w.k)
		}
	}
	// 1e-12: the rounding of (wish − 0.01) − wish for a wish of a few rad is
	// about 1e-16.
	if a := got[3].Adjustment; math.Abs(a+0.01) > 1e-12 {
		t.Errorf("viability adjustment %v, want -0.01 (target minus wish)", a)
	}
}
