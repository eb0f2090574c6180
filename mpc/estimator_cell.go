package mpc

import (
	"fmt"

	"tautline/sim"
)

// NewCellEstimator makes the estimator of a cell: its figure model as the
// process, the anchors placed by the arms' forward kinematics, the cell's
// markers, marker noise and tracker pose. model is the cell's figure model
// (Cell.NewModel); nil builds one with the cell's tick as its step, the
// usual choice, since the filter's grid step is the model's step.
func NewCellEstimator(cell *sim.Cell, model *sim.Model, s EstimatorSettings) (*Estimator, error) {
	if model == nil {
		var err error
		if model, err = cell.NewModel(cell.TickS); err != nil {
			return nil, fmt.Errorf("mpc: estimator model: %w", err)
		}
	}
	if model.NumAnchors() != cell.NumAnchors() {
		return nil, fmt.Errorf("mpc: the model has %d strings, the cell %d", model.NumAnchors(), cell.NumAnchors())
	}
	kin := cell.NewWorkspace(nil)
	proc, err := NewFigureProcess(model, cell.NumJoints(), kin.AnchorsTo)
	if err != nil {
		return nil, err
	}
	ms := MarkerSet{
		Nodes:          make([]int, len(cell.Markers)),
		NoiseM:         cell.MarkerNoiseM,
		TrackerToWorld: cell.TrackerToWorld,
	}
	for i, m := range cell.Markers {
		ms.Nodes[i] = m.Node
	}
	return NewEstimator(proc, ms, s)
}
