package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"os/signal"
	"path/filepath"
	"strings"
	"text/tabwriter"

	"tautline/proto/capture"
	pb "tautline/proto/tautline/v1"
	"tautline/sim"
)

func init() {
	register(&command{
		name:    "fit",
		summary: "fit the figure's parameters to captures and write the fitted cell",
		run:     runFit,
	})
}

const fitHelp = `
Adjusts parameters of the cell's figure model so that the simulated markers
match the markers recorded in the captures, and writes the cell with the
fitted values to FITTED_CELL.

Each capture is replayed through the figure model: the figure starts at
rest at the first observation's measured joints (captures open with the arms
holding still), and every tick is driven by the measured joint positions of
that tick. Measured positions, not the commands, because the servos lag
their commands: the measured joints are where the bars really were. The
simulated markers are compared with the recorded ones at their capture time,
in the tracker frame. Levenberg-Marquardt least squares (Levenberg 1944;
Marquardt 1963) with bounds (lengths within ±50%%, masses and stiffnesses
within a factor 3, damping scales in [0, 10], the tracker within 0.5 m)
minimises the sum of squared marker differences; derivatives come from the
figure step's sensitivities.

Parameter groups for --params (comma-separated):
%s
The report gives every parameter's value before and after with its standard
error (from the Gauss-Newton covariance σ²(JᵀJ)⁻¹, σ² from the residual),
the RMS marker residual (over every marker coordinate) before and after, and
the parameter combinations the captures cannot determine (near-singular
directions of the scaled Jacobian, or too weak for the noise: a standard
error above half their typical size). Those are held at their nominal values
and the others refitted (unless --free-undetermined); record motion that
moves them to fit them. Standard errors assume the model explains the data
up to the tracker noise; the report says when the residual stays well above
the cell's marker noise.

A progress line shows each iteration. Interrupt (Ctrl-C) stops the fit
cleanly: the best values so far are reported and written.

The fitted cell has the figure written inline and URDF paths relative to its
own directory, so the daemon loads it as it is.

With --compare-cue and --compare-profile, the fitted cell is then put to the
test: the simulated cell (the --cell figure with the mismatch profile, the
same disturbances every run) plays the cue closed loop against a daemon
serving --cell and against one serving the fitted cell, twice each. First
each daemon tracks its own reference (the cue simulated on its cell's
model): printed are the tracking error (markers as the tracker saw them
against that reference) and the demo's figure error (the true figure against
the nominal cell's reference). Then both daemons are given the nominal
reference as the cue's reference file, so both aim at the same intended
motion and differ only in the model they estimate and plan with: printed is
the figure error against it. Each row ends with the ratio fitted ÷ nominal.
The first runs' captures are written next to the fitted cell.

Exits 1 when the captures cannot be used or the fit fails, 2 on bad usage.`

type fitFlags struct {
	cell, params, out string
	durationS         float64
	maxIterations     int
	freeUndetermined  bool

	compareCue, compareProfile string
	compareDurationS           float64
	comparePrepareBudgetS      float64
}

func runFit(args []string, stdout, stderr io.Writer) error {
	var f fitFlags
	var groups strings.Builder
	for _, g := range sim.FitParamGroups {
		fmt.Fprintf(&groups, "  %-20s %s\n", g.Name, g.Adds)
	}
	fs := newFlags("fit", "CAPTURE... --cell CELL --out FITTED_CELL [--params LIST]", fmt.Sprintf(fitHelp, groups.String()), stderr)
	fs.StringVar(&f.cell, "cell", "", "the cell file the captures were recorded with (required)")
	fs.StringVar(&f.params, "params", "string_rest_lengths,masses,damping,tracker_offset", "parameter groups to fit, comma-separated")
	fs.StringVar(&f.out, "out", "", "where to write the fitted cell file (required; an existing file is replaced)")
	fs.Float64Var(&f.durationS, "duration-s", 0, "use only the first this many seconds of each capture (0: all of it)")
	fs.IntVar(&f.maxIterations, "max-iterations", 50, "Levenberg-Marquardt iterations at most")
	fs.BoolVar(&f.freeUndetermined, "free-undetermined", false, "write fitted values even for parameters the captures cannot determine (default: hold them at their nominal values and refit the rest)")
	fs.StringVar(&f.compareCue, "compare-cue", "", "after writing, run this cue closed loop on the simulated cell (--cell with --compare-profile) against a daemon serving --cell and one serving the fitted cell, and compare their tracking")
	fs.StringVar(&f.compareProfile, "compare-profile", "", "mismatch profile of the simulated cell for --compare-cue (required with it)")
	fs.Float64Var(&f.compareDurationS, "compare-duration-s", 0, "play only this much of --compare-cue, s (0: all of it)")
	fs.Float64Var(&f.comparePrepareBudgetS, "compare-prepare-budget-s", 0, "the compared daemons' planner prepare budget per tick, s (0: the daemon's default)")
	// Flags may follow the captures: parse, take the next positional, repeat.
	var captures []string
	rest := args
	for {
		if err := parseFlags(fs, rest); err != nil {
			return err
		}
		if fs.NArg() == 0 {
			break
		}
		captures = append(captures, fs.Arg(0))
		rest = fs.Args()[1:]
	}
	switch {
	case len(captures) == 0:
		fs.Usage()
		return fmt.Errorf("%w: name at least one capture file", errUsage)
	case f.cell == "":
		return fmt.Errorf("%w: --cell is required (the cell file the captures were recorded with)", errUsage)
	case f.out == "":
		return fmt.Errorf("%w: --out is required (where to write the fitted cell)", errUsage)
	case f.durationS < 0 || f.maxIterations < 1 || f.compareDurationS < 0 || f.comparePrepareBudgetS < 0:
		return fmt.Errorf("%w: --duration-s, --compare-duration-s and --compare-prepare-budget-s must be ≥ 0 and --max-iterations ≥ 1", errUsage)
	case (f.compareCue == "") != (f.compareProfile == ""):
		return fmt.Errorf("%w: --compare-cue and --compare-profile go together", errUsage)
	}
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt)
	defer stop()
	return fitCaptures(ctx, &f, captures, stdout, stderr)
}

// fitCaptures is the fit subcommand after its flags are parsed; a
// cancelled ctx stops the fit with the best values so far.
func fitCaptures(ctx context.Context, f *fitFlags, captures []string, stdout, stderr io.Writer) error {
	cellPath, err := filepath.Abs(f.cell)
	if err != nil {
		return err
	}
	outPath, err := filepath.Abs(f.out)
	if err != nil {
		return err
	}
	cell, err := sim.LoadCell(cellPath, os.ReadFile)
	if err != nil {
		return err
	}
	params, err := sim.ParseFitParams(cell, f.params)
	if err != nil {
		return fmt.Errorf("%w: --params: %v", errUsage, err)
	}
	prob := &sim.FitProblem{Cell: cell, Params: params}
	for _, path := range captures {
		run, note, err := fitRunFromCapture(path, cell, f.durationS)
		if err != nil {
			return err
		}
		if note != "" {
			fmt.Fprintf(stderr, "tautline fit: %s: %s\n", path, note)
		}
		fmt.Fprintf(stdout, "%s: %d ticks (%.2f s), %d marker sightings\n", path, run.Ticks(cell.NumJoints()), float64(run.Ticks(cell.NumJoints()))*cell.TickS, len(run.Sightings))
		prob.Runs = append(prob.Runs, run)
	}
	nr := float64(prob.NumResiduals())
	tty := isTerminal(stderr)
	progress := func(iter int, cost float64) bool {
		line := fmt.Sprintf("fit: iteration %d, RMS marker residual %.4f mm", iter, 1e3*math.Sqrt(cost/nr))
		if tty {
			fmt.Fprintf(stderr, "\r%s ", line)
		} else {
			fmt.Fprintln(stderr, line)
		}
		return ctx.Err() == nil
	}
	res, err := sim.Fit(prob, sim.FitSettings{LM: sim.LMSettings{MaxIterations: f.maxIterations}, HoldUndetermined: !f.freeUndetermined}, progress)
	if tty {
		fmt.Fprintln(stderr)
	}
	if err != nil {
		return err
	}
	printFit(stdout, res, cell.MarkerNoiseM)
	note := fmt.Sprintf("fitted by tautline fit (%s) to %s: RMS marker residual %.3g mm → %.3g mm", f.params, strings.Join(baseNames(captures), ", "), 1e3*res.RMSBeforeM, 1e3*res.RMSAfterM)
	data, err := sim.MarshalCell(res.Cell, outPath, note)
	if err != nil {
		return err
	}
	if err := os.MkdirAll(filepath.Dir(outPath), 0o755); err != nil {
		return err
	}
	if err := writeFileAtomic(outPath, data); err != nil {
		return err
	}
	if _, err := sim.LoadCell(outPath, os.ReadFile); err != nil {
		return fmt.Errorf("the written cell does not load: %w", err)
	}
	fmt.Fprintf(stdout, "wrote %s\n", f.out)
	if f.compareCue == "" {
		return nil
	}
	cmp, err := compareClosedLoop(ctx, cellPath, outPath, f.compareCue, f.compareProfile, f.compareDurationS, f.comparePrepareBudgetS, filepath.Dir(outPath), stdout)
	if err != nil {
		return err
	}
	printComparison(stdout, cmp)
	return nil
}

func baseNames(paths []string) []string {
	out := make([]string, len(paths))
	for i, p := range paths {
		out[i] = filepath.Base(p)
	}
	return out
}

// writeFileAtomic writes through a temporary file in the same directory
// and renames it, so an interrupted write never leaves half a cell file.
func writeFileAtomic(path string, data []byte) error {
	tmp, err := os.CreateTemp(filepath.Dir(path), ".tautline-fit-*")
	if err != nil {
		return err
	}
	_, werr := tmp.Write(data)
	cerr := tmp.Close()
	if err := errors.Join(werr, cerr); err != nil {
		os.Remove(tmp.Name())
		return err
	}
	if err := os.Rename(tmp.Name(), path); err != nil {
		os.Remove(tmp.Name())
		return err
	}
	return nil
}

// fitRunFromCapture reads a capture's observations into a fit run: the
// ticks are the observations' cue_time_s on the cell's tick grid from the
// first one, each with its measured joints (a missing tick's joints are
// interpolated between its neighbours); each marker sighting belongs to the
// tick of its capture_time_s. It returns a note for a person when
// something was left out.
func fitRunFromCapture(path string, cell *sim.Cell, durationS float64) (sim.FitRun, string, error) {
	var run sim.FitRun
	recs, damage, err := capture.ReadFile(path)
	if err != nil {
		return run, "", err
	}
	var notes []string
	if damage != nil {
		notes = append(notes, fmt.Sprintf("%v; using the records before it", damage))
	}
	if len(recs) == 0 || recs[0].GetSessionStart() == nil {
		return run, "", fmt.Errorf("%s: not a capture that opens with a session start", path)
	}
	start := recs[0].GetSessionStart()
	if start.GetCellName() != cell.Name {
		return run, "", fmt.Errorf("%s: recorded on cell %q, --cell is %q", path, start.GetCellName(), cell.Name)
	}
	if names := start.GetJointNames(); strings.Join(names, ",") != strings.Join(cell.JointNames(), ",") {
		return run, "", fmt.Errorf("%s: recorded with joints %v, the cell has %v", path, names, cell.JointNames())
	}
	h, nq := cell.TickS, cell.NumJoints()
	if math.Abs(start.GetTickPeriodS()-h) > 1e-12 {
		return run, "", fmt.Errorf("%s: recorded at a tick of %v s, the cell's is %v s", path, start.GetTickPeriodS(), h)
	}
	markerIndex := map[string]int{}
	for i, m := range cell.Markers {
		markerIndex[m.ID] = i
	}
	var obs []*pb.Observation
	for _, rec := range recs[1:] {
		if o := rec.GetObservation(); o != nil {
			obs = append(obs, o)
		}
	}
	if len(obs) < 2 {
		return run, "", fmt.Errorf("%s: %d observations; a fit needs a recorded motion", path, len(obs))
	}
	t0 := obs[0].GetCueTimeS()
	tickOf := func(t float64) (int, bool) {
		x := (t - t0) / h
		k := math.Round(x)
		return int(k), math.Abs(x-k) < 0.25
	}
	have := map[int][]float64{}
	last := 0
	offGrid, unknown := 0, 0
	for _, o := range obs {
		k, ok := tickOf(o.GetCueTimeS())
		if !ok || k < 0 {
			offGrid++
			continue
		}
		if durationS > 0 && float64(k)*h > durationS+1e-9 {
			break
		}
		q := o.GetMeasuredJointPositions()
		if len(q) != nq {
			return run, "", fmt.Errorf("%s: observation %d has %d measured joints, the cell %d", path, o.GetTickSeq(), len(q), nq)
		}
		have[k] = q
		last = max(last, k)
		kc, ok := tickOf(o.GetCaptureTimeS())
		if !ok {
			offGrid++
			continue
		}
		if kc < 0 {
			continue // seen before the first observation: no state for it
		}
		for _, m := range o.GetMarkers() {
			i, ok := markerIndex[m.GetMarkerId()]
			if !ok {
				unknown++
				continue
			}
			run.Sightings = append(run.Sightings, sim.FitSighting{Tick: kc, Marker: i, PosM: [3]float64{m.GetXM(), m.GetYM(), m.GetZM()}})
		}
	}
	if last < 1 {
		return run, "", fmt.Errorf("%s: the observations span less than one tick", path)
	}
	run.JointsQ = make([]float64, (last+1)*nq)
	prev := 0
	for k := 0; k <= last; k++ {
		q, ok := have[k]
		if ok {
			copy(run.JointsQ[k*nq:], q)
			prev = k
			continue
		}
		next := k + 1
		for ; next <= last && have[next] == nil; next++ {
		}
		w := float64(k-prev) / float64(next-prev)
		for j := range nq {
			run.JointsQ[k*nq+j] = (1-w)*have[prev][j] + w*have[next][j]
		}
	}
	kept := run.Sightings[:0]
	for _, s := range run.Sightings {
		if s.Tick <= last {
			kept = append(kept, s)
		}
	}
	run.Sightings = kept
	for j := range nq {
		if math.Abs(run.JointsQ[nq+j]-run.JointsQ[j]) > 1e-6 {
			notes = append(notes, "the arms were moving at the first observation; the fit assumes the figure at rest there")
			break
		}
	}
	if offGrid > 0 {
		notes = append(notes, fmt.Sprintf("%d observation times off the %v s tick grid left out", offGrid, h))
	}
	if unknown > 0 {
		notes = append(notes, fmt.Sprintf("%d sightings of markers the cell does not have left out", unknown))
	}
	return run, strings.Join(notes, "; "), nil
}

func printFit(w io.Writer, r *sim.FitResult, noiseM float64) {
	fmt.Fprintf(w, "fit: %s after %d iterations (%d evaluations)\n", r.LM.Reason, r.LM.Iterations, r.LM.Evaluations)
	if r.LM.Interrupted {
		fmt.Fprintln(w, "fit: interrupted; these are the best values so far")
	}
	fmt.Fprintf(w, "RMS marker residual: %.4f mm before, %.4f mm after (residual σ %.4f mm)\n", 1e3*r.RMSBeforeM, 1e3*r.RMSAfterM, 1e3*math.Sqrt(r.Stats.Sigma2))
	if sigma := math.Sqrt(r.Stats.Sigma2); sigma > 1.5*noiseM {
		fmt.Fprintf(w, "note: the residual σ is %.1f× the cell's marker noise (%.3g mm): the model still misses something (unfitted parameters, disturbances), and the standard errors understate the uncertainty\n", sigma/noiseM, 1e3*noiseM)
	}
	undetermined := map[int]bool{}
	for _, dir := range r.Stats.Undetermined {
		for _, j := range dir {
			undetermined[j] = true
		}
	}
	tw := tabwriter.NewWriter(w, 2, 8, 2, ' ', 0)
	fmt.Fprintln(tw, "  parameter\tbefore\tafter\tstd error\tunit\tnote")
	for j, p := range r.Params {
		se := fmt.Sprintf("%.3g", r.StdErr[j])
		var note []string
		if undetermined[j] {
			se = "-"
			note = append(note, "undetermined")
		}
		if r.Held[j] {
			note = append(note, "held at nominal")
		}
		if r.AtBound[j] {
			note = append(note, "at a bound")
		}
		unit := p.Unit()
		if unit == "" {
			unit = "×"
		}
		fmt.Fprintf(tw, "  %s\t%.6g\t%.6g\t%s\t%s\t%s\n", p.Name, r.Before[j], r.After[j], se, unit, strings.Join(note, ", "))
	}
	tw.Flush()
	fmt.Fprintf(w, "condition of the scaled Jacobian: %.3g\n", r.Stats.Condition)
	if len(r.Stats.Undetermined) == 0 {
		fmt.Fprintln(w, "every parameter is determined by the captures")
		return
	}
	for _, dir := range r.Stats.Undetermined {
		names := make([]string, len(dir))
		for i, j := range dir {
			names[i] = r.Params[j].Name
		}
		if len(names) == 1 {
			fmt.Fprintf(w, "the captures cannot determine %s\n", names[0])
			continue
		}
		fmt.Fprintf(w, "the captures cannot determine a combination of %s\n", strings.Join(names, ", "))
	}
}
