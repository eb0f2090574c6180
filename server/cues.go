package server

import (
	"crypto/sha256"
	"fmt"

	"tautline/mpc"
	pb "tautline/proto/tautline/v1"
	"tautline/sim"
)

// loadedCue is a cue checked against its cell, with its reference: the
// reference file if one was given, else the cue simulated on the cell's
// model (mpc.SimulateNominal).
type loadedCue struct {
	name        string
	cue         *mpc.Cue
	ref         mpc.MarkerReference
	csv         []byte
	refCSV      []byte // nil without a reference file
	fileName    string
	refFileName string
	info        *pb.CueInfo
}

// loadCue parses and checks a cue for cell. It does the slow work (the
// limit check, the reference simulation) and touches no shared state.
func loadCue(cell *sim.Cell, req *pb.LoadCueRequest) (*loadedCue, error) {
	file := req.GetCueFileName()
	if file == "" {
		file = req.GetCueName() + ".csv"
	}
	cue, err := mpc.ParseCue(file, req.GetCueCsv(), mpc.CueJointsOf(cell), mpc.CueSettings{TickS: cell.TickS})
	if err != nil {
		return nil, err
	}
	lc := &loadedCue{
		name:     req.GetCueName(),
		cue:      cue,
		csv:      append([]byte(nil), req.GetCueCsv()...),
		fileName: file,
	}
	if len(req.GetReferenceCsv()) > 0 {
		refFile := req.GetReferenceFileName()
		if refFile == "" {
			refFile = req.GetCueName() + ".reference.csv"
		}
		ids := make([]string, len(cell.Markers))
		for i, m := range cell.Markers {
			ids[i] = m.ID
		}
		ref, err := mpc.ParseReference(refFile, req.GetReferenceCsv(), ids)
		if err != nil {
			return nil, err
		}
		lc.ref, lc.refCSV, lc.refFileName = ref, append([]byte(nil), req.GetReferenceCsv()...), refFile
	} else {
		nom, err := mpc.SimulateNominal(cell, cue, cue.StartS(), cue.EndS(), mpc.NominalSettings{})
		if err != nil {
			return nil, fmt.Errorf("simulating the cue's reference on the cell's model: %w", err)
		}
		lc.ref = nom
	}
	sum := sha256.Sum256(lc.csv)
	lc.info = &pb.CueInfo{
		CueName:      lc.name,
		DurationS:    cue.DurationS(),
		JointCount:   uint32(cell.NumJoints()),
		HasReference: lc.refCSV != nil,
		CueSha256:    sum[:],
	}
	return lc, nil
}
