package main

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"math"
	"strconv"

	"tautline/client"
	"tautline/mpc"
	pb "tautline/proto/tautline/v1"
	"tautline/sim"
)

// referenceCSV writes the nominal reference (the cue on the nominal cell's
// model) as a reference file (tautline.reference/1) sampled at every tick
// from the cue's start to its end, so that a daemon serving another cell
// tracks the same intended motion.
func referenceCSV(cell *sim.Cell, ref *mpc.Nominal, startS, endS float64) []byte {
	var b bytes.Buffer
	b.WriteString("# tautline.reference/1\ntime_s")
	for _, m := range cell.Markers {
		fmt.Fprintf(&b, ",%s.x,%s.y,%s.z", m.ID, m.ID, m.ID)
	}
	b.WriteByte('\n')
	pos := make([]float64, 3*len(cell.Markers))
	n := int(math.Round((endS - startS) / cell.TickS))
	for k := 0; k <= n; k++ {
		t := startS + float64(k)*cell.TickS
		ref.MarkersTo(pos, t)
		b.WriteString(strconv.FormatFloat(t, 'f', -1, 64))
		for _, v := range pos {
			b.WriteByte(',')
			b.WriteString(strconv.FormatFloat(v, 'g', -1, 64))
		}
		b.WriteByte('\n')
	}
	return b.Bytes()
}

// closedLoopNominalReference runs the simulated cell (in.cell with
// in.profile) closed loop, as fast as the daemon answers, against a daemon
// serving cellPath that is given the nominal reference as the cue's
// reference file, and returns the RMS over the live ticks of the true
// figure error against that reference (the demo's figure error), m.
func closedLoopNominalReference(ctx context.Context, cellPath string, in *simInputs, ref *mpc.Nominal, durationS, prepareBudgetS float64) (float64, error) {
	cell, cue := in.cell, in.cue
	dm, err := startDaemon(cellPath, "", withPrepareBudget(prepareBudgetS))
	if err != nil {
		return 0, err
	}
	defer dm.stop()
	c, err := client.Dial(dm.addr, client.DialSettings{})
	if err != nil {
		return 0, err
	}
	defer c.Close()
	startS, endS := cue.StartS(), cue.EndS()
	if durationS > 0 && startS+durationS < endS {
		endS = startS + durationS
	}
	const cueName = "fit-check-reference"
	if _, err := c.LoadCue(ctx, client.CueFile{
		CellName: cell.Name, CueName: cueName, CSV: in.cueCSV, FileName: in.cuePath,
		ReferenceCSV: referenceCSV(cell, ref, cue.StartS(), cue.EndS()), ReferenceFileName: "nominal.reference.csv",
	}); err != nil {
		return 0, err
	}
	if _, err := c.ArmCue(ctx, cell.Name, cueName); err != nil {
		return 0, err
	}
	plant, err := sim.NewPlant(cell, in.profile)
	if err != nil {
		return 0, err
	}
	nq, tick := cell.NumJoints(), cell.TickS
	q0 := make([]float64, nq)
	cue.PositionTo(q0, startS)
	const standby = 3
	if err := plant.Settle(q0, startS-standby*tick); err != nil {
		return 0, err
	}
	dctx, cancel := context.WithCancel(ctx)
	defer cancel()
	drive, err := c.Drive(dctx)
	if err != nil {
		return 0, err
	}
	po := sim.NewPlantObservation(cell)
	refM := make([]float64, 3*len(cell.Markers))
	var sumSq float64
	ticks := 0
	live := false
	var originS float64
	for k := 0; ; k++ {
		if !live && k >= standby {
			_, err := c.Start(ctx, cell.Name)
			switch {
			case err == nil:
				live, originS = true, plant.TimeS()
			case errors.Is(err, client.ErrFailedPrecondition) && float64(k)*tick < 10:
			default:
				return 0, fmt.Errorf("after %d standby ticks: %w", k, err)
			}
		}
		if err := ctx.Err(); err != nil {
			return 0, err
		}
		plant.Observe(po)
		obs := &pb.Observation{TickSeq: uint64(k + 1), CueTimeS: plant.TimeS(), CaptureTimeS: po.CaptureTimeS, MeasuredJointPositions: append([]float64(nil), plant.Joints()...)}
		if k == 0 {
			obs.CellName = cell.Name
		}
		for m, mk := range cell.Markers {
			if po.Visible[m] {
				obs.Markers = append(obs.Markers, &pb.MarkerSighting{MarkerId: mk.ID, XM: po.MarkersM[3*m], YM: po.MarkersM[3*m+1], ZM: po.MarkersM[3*m+2]})
			}
		}
		cmd, err := drive.Tick(obs)
		if err != nil {
			return 0, fmt.Errorf("tick %d: %w", k+1, err)
		}
		next := cmd.GetNext().GetPositions()
		if len(next) != nq {
			return 0, fmt.Errorf("tick %d: the daemon sent %d joint targets for %d joints", k+1, len(next), nq)
		}
		if err := plant.Advance(next); err != nil {
			return 0, err
		}
		if !live {
			continue
		}
		tNow := plant.TimeS() - originS + startS
		ref.MarkersTo(refM, tNow)
		x := plant.Nodes()
		var e float64
		for m, mk := range cell.Markers {
			for a := range 3 {
				d := x[3*mk.Node+a] - refM[3*m+a]
				e += d * d
			}
		}
		sumSq += e / float64(len(cell.Markers))
		ticks++
		if tNow >= endS-1e-9 {
			break
		}
	}
	if _, err := c.Stop(ctx, cell.Name, "fit check ended"); err != nil {
		return 0, err
	}
	if err := drive.CloseSend(); err != nil {
		return 0, err
	}
	return math.Sqrt(sumSq / float64(ticks)), nil
}
