package mpc

import "tautline/sim"

// CueJointsOf returns the cell's joints, in the cell's joint order, as the
// cue loader takes them.
func CueJointsOf(cell *sim.Cell) []CueJoint {
	out := make([]CueJoint, 0, cell.NumJoints())
	for _, a := range cell.Arms {
		for k, l := range a.Limits {
			out = append(out, CueJoint{
				Name:        l.Name,
				Lower:       l.Lower,
				Upper:       l.Upper,
				MaxVelocity: l.MaxVelocity,
				MaxAccel:    l.MaxAccel,
				Prismatic:   a.Chain.Joint(k).Kind == sim.Prismatic,
			})
		}
	}
	return out
}
