package server

import "math"

// The operator's tracking error (CellStatus.tracking_error_m) is measured
// from the markers the tracker saw, not from the estimate: each sighting
// the estimator took this tick (its gate's rejections left out) is mapped
// from the tracker frame to the world with the cell's transform and
// compared with the cue's reference for that marker at the frame's capture
// time. The estimate would need the estimator's per-marker offsets added
// (mpc.Estimator.MarkerOffsetTo) to be comparable with the reference, and
// would then still show the filter's view rather than what the tracker
// measured; the observed markers need neither.

// observedTrackingError sets e.trackErrM and e.trackErrMarkers from this
// tick's accepted markers (e.markers minus e.estRep.Rejected), captured at
// controller-clock time captureT. It leaves them as they were when no
// marker is left or the frame was captured before the cue started. Call it
// only with a session whose cue clock has started (e.hasOrigin). It
// allocates nothing.
func (e *engine) observedTrackingError(captureT float64) {
	tc := e.playT(captureT)
	if tc < e.armed.lc.cue.StartS() || len(e.markers) == 0 {
		return
	}
	e.armed.lc.ref.MarkersTo(e.refBuf, tc)
	var sum float64
	n := 0
	for _, m := range e.markers {
		if e.markerRejected(m.Marker) {
			continue
		}
		w := e.cell.TrackerToWorld.Apply(m.PosTrackerM)
		for k := 0; k < 3; k++ {
			d := w[k] - e.refBuf[3*m.Marker+k]
			sum += d * d
		}
		n++
	}
	if n == 0 {
		return
	}
	e.trackErrM = math.Sqrt(sum / float64(n))
	e.trackErrMarkers = n
}

// markerRejected says whether the estimator's gate threw out marker k's
// sighting on this tick.
func (e *engine) markerRejected(k int) bool {
	for _, r := range e.estRep.Rejected {
		if r.Marker == k {
			return true
		}
	}
	return false
}
