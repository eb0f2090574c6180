package server

import (
	"fmt"
	"math"

	"tautline/mpc"
	pb "tautline/proto/tautline/v1"
)

// tickError is why a tick's observation was not used: the code, the path
// of the offending field and a message for a person. The zero value means
// the observation is usable.
type tickError struct {
	code    pb.TickErrorCode
	field   string
	message string
}

func (e tickError) ok() bool { return e.code == pb.TickErrorCode_TICK_ERROR_CODE_UNSPECIFIED }

func badTick(code pb.TickErrorCode, field, format string, args ...any) tickError {
	return tickError{code: code, field: field, message: fmt.Sprintf(format, args...)}
}

// Range limits on observation values, beyond which they are garbage
// rather than measurements.
const (
	// maxClockS: at 1e10 s a float64 still resolves 2e-6 s, far finer than
	// a tick (and Unix time in seconds fits).
	maxClockS = 1e10
	// maxMagnitude bounds joint positions (rad or m) and marker
	// coordinates (m).
	maxMagnitude = 1e4
)

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

// validate checks one observation against the cell and the stream's
// history, field by field, and maps its markers into e.markers. It returns
// the first problem found; the checks go in field order so a message names
// the earliest bad field. It allocates only when it reports a problem.
func (e *engine) validate(obs *pb.Observation) tickError {
	const (
		wrongSize = pb.TickErrorCode_TICK_ERROR_CODE_WRONG_SIZE
		notFinite = pb.TickErrorCode_TICK_ERROR_CODE_NOT_FINITE
		unknown   = pb.TickErrorCode_TICK_ERROR_CODE_UNKNOWN_MARKER
		duplicate = pb.TickErrorCode_TICK_ERROR_CODE_DUPLICATE_MARKER
		tooLarge  = pb.TickErrorCode_TICK_ERROR_CODE_OUT_OF_RANGE
		timeOrder = pb.TickErrorCode_TICK_ERROR_CODE_TIME_ORDER
	)
	if n := obs.GetCellName(); n != "" && n != e.cell.Name {
		return badTick(pb.TickErrorCode_TICK_ERROR_CODE_UNKNOWN_CELL, "cell_name",
			"this stream drives cell %q; it cannot change to %q (open another stream)", e.cell.Name, n)
	}
	if e.haveSeq && obs.GetTickSeq() != e.expectSeq {
		return badTick(pb.TickErrorCode_TICK_ERROR_CODE_TICK_SEQ, "tick_seq",
			"tick_seq %d, expected %d (one more than the previous observation's)", obs.GetTickSeq(), e.expectSeq)
	}
	t, tc := obs.GetCueTimeS(), obs.GetCaptureTimeS()
	if !finite(t) {
		return badTick(notFinite, "cue_time_s", "cue_time_s is %v; send the controller clock's time in seconds", t)
	}
	if !finite(tc) {
		return badTick(notFinite, "capture_time_s", "capture_time_s is %v; send the tracker frame's time on the controller clock in seconds", tc)
	}
	if math.Abs(t) > maxClockS {
		return badTick(tooLarge, "cue_time_s", "cue_time_s %v is beyond ±%g s, where a float64 cannot tell ticks apart; use a clock that starts near zero", t, maxClockS)
	}
	if math.Abs(tc) > maxClockS {
		return badTick(tooLarge, "capture_time_s", "capture_time_s %v is beyond ±%g s, where a float64 cannot tell ticks apart; use a clock that starts near zero", tc, maxClockS)
	}
	q := obs.GetMeasuredJointPositions()
	if len(q) != e.nq {
		return badTick(wrongSize, "measured_joint_positions",
			"%d measured joint positions; cell %q has %d joints (%s ...)", len(q), e.cell.Name, e.nq, e.cell.JointNames()[0])
	}
	for i, v := range q {
		if !finite(v) {
			return badTick(notFinite, fmt.Sprintf("measured_joint_positions[%d]", i),
				"measured position of joint %s is %v, not a usable position", e.cell.JointNames()[i], v)
		}
		if math.Abs(v) > maxMagnitude {
			return badTick(tooLarge, fmt.Sprintf("measured_joint_positions[%d]", i),
				"measured position of joint %s is %v, beyond ±%g (rad or m): not a measurement", e.cell.JointNames()[i], v, maxMagnitude)
		}
	}
	ms := obs.GetMarkers()
	if len(ms) > len(e.cell.Markers) {
		return badTick(wrongSize, "markers", "%d markers; cell %q has only %d", len(ms), e.cell.Name, len(e.cell.Markers))
	}
	clear(e.markerSeen)
	e.markers = e.markers[:0]
	for i, m := range ms {
		k, known := e.markerIndex[m.GetMarkerId()]
		if !known {
			return badTick(unknown, fmt.Sprintf("markers[%d].marker_id", i),
				"marker %q is not a marker of cell %q", m.GetMarkerId(), e.cell.Name)
		}
		if e.markerSeen[k] {
			return badTick(duplicate, fmt.Sprintf("markers[%d].marker_id", i),
				"marker %q appears twice in one observation; send each marker once", m.GetMarkerId())
		}
		e.markerSeen[k] = true
		p := [3]float64{m.GetXM(), m.GetYM(), m.GetZM()}
		for a, v := range p {
			if !finite(v) {
				return badTick(notFinite, fmt.Sprintf("markers[%d].%s", i, [3]string{"x_m", "y_m", "z_m"}[a]),
					"marker %q coordinate is %v m, not a usable position", m.GetMarkerId(), v)
			}
			if math.Abs(v) > maxMagnitude {
				return badTick(tooLarge, fmt.Sprintf("markers[%d].%s", i, [3]string{"x_m", "y_m", "z_m"}[a]),
					"marker %q coordinate is %v m, beyond ±%g m: not a measurement", m.GetMarkerId(), v, maxMagnitude)
			}
		}
		e.markers = append(e.markers, mpc.MarkerObs{Marker: k, PosTrackerM: p})
	}
	if e.haveLastT && !(t > e.lastT) {
		if t == e.lastT {
			return badTick(timeOrder, "cue_time_s", "cue_time_s %v repeats the previous observation's; send one observation per tick", t)
		}
		return badTick(timeOrder, "cue_time_s", "cue_time_s %v went backwards from %v", t, e.lastT)
	}
	if tc > t {
		return badTick(timeOrder, "capture_time_s", "capture_time_s %v is after cue_time_s %v; markers cannot be seen before they are captured", tc, t)
	}
	if t-tc > e.maxLatencyS {
		return badTick(pb.TickErrorCode_TICK_ERROR_CODE_LATE, "capture_time_s",
			"markers captured %.3f s before cue_time_s; more than the %.3f s allowed (-max-latency-s)", t-tc, e.maxLatencyS)
	}
	if e.haveCapture && tc < e.lastCapture {
		return badTick(timeOrder, "capture_time_s", "capture_time_s %v went backwards from %v", tc, e.lastCapture)
	}
	if e.state == pb.SessionState_SESSION_STATE_IDLE {
		return badTick(pb.TickErrorCode_TICK_ERROR_CODE_NO_CUE_ARMED, "cell_name",
			"no cue is armed on cell %q; load one with LoadCue and arm it with ArmCue", e.cell.Name)
	}
	return tickError{}
}
