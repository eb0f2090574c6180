package main

import (
	"context"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"text/tabwriter"

	"tautline/client"
	"tautline/mpc"
	"tautline/sim"
)

// fitComparison is a closed-loop run of the same simulated cell (the
// nominal cell with a mismatch profile, the same disturbances) against a
// daemon serving the nominal cell and one serving the fitted cell.
type fitComparison struct {
	// TrackingErrorM is the RMS, over the run's ticks, of the tracker's
	// view of the figure error: observed markers (mapped to the world by
	// the daemon's cell) against the reference that daemon tracks (the
	// cue simulated on its cell's model). It includes the marker noise.
	NominalTrackingM, FittedTrackingM float64
	// FigureErrorM is the demo's figure error: the plant's true marker
	// nodes against the nominal cell's reference, RMS.
	NominalFigureM, FittedFigureM float64
	// SameReferenceM is the figure error when both daemons are given the
	// nominal reference as the cue's reference file, so both aim at the
	// same intended motion and differ only in the model they estimate and
	// plan with: the plant's true marker nodes against that reference, RMS.
	NominalSameReferenceM, FittedSameReferenceM float64
}

// compareClosedLoop runs the comparison; captures go to dir.
func compareClosedLoop(ctx context.Context, nominalPath, fittedPath, cuePath, profilePath string, durationS, prepareBudgetS float64, dir string, stdout io.Writer) (*fitComparison, error) {
	in, err := loadSimInputs(nominalPath, cuePath, profilePath)
	if err != nil {
		return nil, err
	}
	fitted, err := sim.LoadCell(fittedPath, os.ReadFile)
	if err != nil {
		return nil, err
	}
	var cmp fitComparison
	for _, which := range []struct {
		label, cellPath string
		cell            *sim.Cell
		tracking        *float64
		figure          *float64
	}{
		{"nominal", nominalPath, in.cell, &cmp.NominalTrackingM, &cmp.NominalFigureM},
		{"fitted", fittedPath, fitted, &cmp.FittedTrackingM, &cmp.FittedFigureM},
	} {
		capPath := filepath.Join(dir, "closed-loop-"+which.label+"-cell.tlcap")
		os.Remove(capPath)
		res, err := closedLoopWith(ctx, which.cellPath, in, capPath, durationS, prepareBudgetS, which.label, stdout)
		if err != nil {
			return nil, fmt.Errorf("closed loop with the %s cell: %w", which.label, err)
		}
		*which.figure = res.RMSErrorM
		run, err := client.ReadCaptureRun(capPath)
		if err != nil {
			return nil, err
		}
		ref, err := mpc.SimulateNominal(which.cell, in.cue, in.cue.StartS(), in.cue.EndS(), mpc.NominalSettings{})
		if err != nil {
			return nil, fmt.Errorf("reference on the %s cell: %w", which.label, err)
		}
		run.Cell, run.Ref = which.cell, ref
		_, errM := run.ObservedError()
		*which.tracking = client.RMS(errM)
	}
	nominalRef, err := mpc.SimulateNominal(in.cell, in.cue, in.cue.StartS(), in.cue.EndS(), mpc.NominalSettings{})
	if err != nil {
		return nil, err
	}
	for _, which := range []struct {
		label, cellPath string
		dst             *float64
	}{{"nominal", nominalPath, &cmp.NominalSameReferenceM}, {"fitted", fittedPath, &cmp.FittedSameReferenceM}} {
		fmt.Fprintf(stdout, "closed loop, %s cell, nominal reference file\n", which.label)
		if *which.dst, err = closedLoopNominalReference(ctx, which.cellPath, in, nominalRef, durationS, prepareBudgetS); err != nil {
			return nil, fmt.Errorf("closed loop with the %s cell and the nominal reference: %w", which.label, err)
		}
	}
	return &cmp, nil
}

// closedLoopWith runs the simulated cell (nominal cell, profile) closed
// loop against an in-process daemon serving cellPath.
func closedLoopWith(ctx context.Context, cellPath string, in *simInputs, capPath string, durationS, prepareBudgetS float64, label string, stdout io.Writer) (*client.SimResult, error) {
	dm, err := startDaemon(cellPath, "", withPrepareBudget(prepareBudgetS))
	if err != nil {
		return nil, err
	}
	defer dm.stop()
	c, err := client.Dial(dm.addr, client.DialSettings{})
	if err != nil {
		return nil, err
	}
	defer c.Close()
	prog := newProgress(stdout, "closed-loop, "+label+" cell")
	res, err := client.RunSimCell(ctx, c, client.SimSettings{
		Cell: in.cell, Cue: in.cue, CueCSV: in.cueCSV, CueName: "fit-check", CueFileName: in.cuePath,
		Profile: in.profile, Fast: true, DurationS: durationS, CapturePath: capPath, Progress: prog.update,
	})
	prog.done()
	return res, err
}

func printComparison(w io.Writer, c *fitComparison) {
	tw := tabwriter.NewWriter(w, 2, 8, 2, ' ', 0)
	fmt.Fprintln(tw, "closed loop\tnominal cell\tfitted cell\tfitted ÷ nominal")
	fmt.Fprintf(tw, "tracking error (observed vs the daemon's own reference), RMS\t%.2f mm\t%.2f mm\t%.3f\n", 1e3*c.NominalTrackingM, 1e3*c.FittedTrackingM, c.FittedTrackingM/c.NominalTrackingM)
	fmt.Fprintf(tw, "figure error (true vs the nominal reference), each daemon on its own reference, RMS\t%.2f mm\t%.2f mm\t%.3f\n", 1e3*c.NominalFigureM, 1e3*c.FittedFigureM, c.FittedFigureM/c.NominalFigureM)
	fmt.Fprintf(tw, "figure error (true vs the nominal reference), both given the nominal reference, RMS\t%.2f mm\t%.2f mm\t%.3f\n", 1e3*c.NominalSameReferenceM, 1e3*c.FittedSameReferenceM, c.FittedSameReferenceM/c.NominalSameReferenceM)
	tw.Flush()
}
