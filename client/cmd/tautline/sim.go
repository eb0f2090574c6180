package main

import (
	"context"
	"fmt"
	"io"
	"os"
	"os/signal"
	"time"

	"tautline/client"
	"tautline/mpc"
	"tautline/sim"
)

func init() {
	register(&command{
		name:    "sim",
		summary: "rehearse a cue on a simulated, deliberately mismatched cell",
		run:     runSim,
	})
}

const simHelp = `
Runs a simulated cell controller against a daemon: the cell's figure with a
mismatch profile applied (string lengths, masses, damping, pushes, marker
noise, occlusion, latency, servo lag) streams one observation per tick and
applies the daemon's commands. With -open-loop it plays the nominal cue and
ignores the corrections (the baseline a studio has today).

Without -addr a daemon is started in this process on a free loopback port,
serving CELL. The cue is loaded and armed, a few ticks are sent in standby,
then the cue is started and played to its end (or for -duration-s).

Every command the daemon sends is checked against the cell's joint limits by
an independent checker (position, velocity and acceleration from the targets
themselves, not the daemon's guard) and violations are counted. The figure
error is the root mean square over markers of the distance between the
simulated figure's true marker nodes and the reference: the cue simulated on
the cell's nominal model from rest (as the daemon tracks it), in metres.

What the simulated cell sent and received is recorded to a capture that
'tautline replay' and 'tautline report' read.

Exits 0 after a run with no limit violation, 1 on errors or violations,
2 on bad usage.`

type simFlags struct {
	daemon    daemonFlags
	profile   string
	openLoop  bool
	fast      bool
	durationS float64
	capture   string
	noCapture bool
	cueName   string
}

func runSim(args []string, stdout, stderr io.Writer) error {
	var f simFlags
	fs := newFlags("sim", "[flags] CELL CUE", simHelp, stderr)
	f.daemon.bind(fs, "start a daemon in this process serving CELL")
	fs.StringVar(&f.profile, "profile", "", "mismatch profile (tautline.mismatch/1 JSON); empty: a perfect plant")
	fs.BoolVar(&f.openLoop, "open-loop", false, "play the nominal cue and ignore the daemon's corrections (the baseline)")
	fs.BoolVar(&f.fast, "fast", false, "run as fast as the daemon answers instead of at the tick rate")
	fs.Float64Var(&f.durationS, "duration-s", 0, "play only this much of the cue, s (0: all of it)")
	fs.StringVar(&f.capture, "capture", "", "capture file to write (must not exist); empty: sim-<mode>-<time>.tlcap here")
	fs.BoolVar(&f.noCapture, "no-capture", false, "record nothing")
	fs.StringVar(&f.cueName, "cue-name", "sim", "name to load the cue under on the daemon")
	args, err := parseInterspersed(fs, args)
	if err != nil {
		return err
	}
	if len(args) != 2 {
		fs.Usage()
		return fmt.Errorf("%w: want a cell file and a cue file, got %d arguments", errUsage, len(args))
	}
	if f.durationS < 0 {
		return fmt.Errorf("%w: -duration-s %v is negative", errUsage, f.durationS)
	}
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt)
	defer stop()
	res, err := simulate(ctx, &f, args[0], args[1], stdout)
	if err != nil {
		return err
	}
	if n := res.Checker.Violations(); n > 0 {
		return fmt.Errorf("%d joint limit violations in the daemon's commands", n)
	}
	return nil
}

// simInputs are a sim run's files, loaded and checked.
type simInputs struct {
	cell    *sim.Cell
	cue     *mpc.Cue
	cueCSV  []byte
	cuePath string
	profile *sim.MismatchProfile
}

func loadSimInputs(cellPath, cuePath, profilePath string) (*simInputs, error) {
	cell, err := sim.LoadCell(cellPath, os.ReadFile)
	if err != nil {
		return nil, err
	}
	csv, err := os.ReadFile(cuePath)
	if err != nil {
		return nil, err
	}
	cue, err := mpc.ParseCue(cuePath, csv, mpc.CueJointsOf(cell), mpc.CueSettings{TickS: cell.TickS})
	if err != nil {
		return nil, err
	}
	in := &simInputs{cell: cell, cue: cue, cueCSV: csv, cuePath: cuePath}
	if profilePath != "" {
		data, err := os.ReadFile(profilePath)
		if err != nil {
			return nil, err
		}
		if in.profile, err = sim.ParseMismatch(profilePath, data); err != nil {
			return nil, err
		}
	}
	return in, nil
}

func modeName(openLoop bool) string {
	if openLoop {
		return "open-loop"
	}
	return "closed-loop"
}

func simulate(ctx context.Context, f *simFlags, cellPath, cuePath string, stdout io.Writer) (*client.SimResult, error) {
	in, err := loadSimInputs(cellPath, cuePath, f.profile)
	if err != nil {
		return nil, err
	}
	conn, err := f.daemon.connect(cellPath, nil)
	if err != nil {
		return nil, err
	}
	defer conn.Close()
	capture := f.capture
	if capture == "" && !f.noCapture {
		capture = fmt.Sprintf("sim-%s-%s.tlcap", modeName(f.openLoop), time.Now().UTC().Format("20060102T150405"))
	}
	if f.noCapture {
		capture = ""
	}
	prog := newProgress(stdout, modeName(f.openLoop))
	res, err := client.RunSimCell(ctx, conn.Client, client.SimSettings{
		Cell: in.cell, Cue: in.cue, CueCSV: in.cueCSV, CueName: f.cueName, CueFileName: in.cuePath,
		Profile: in.profile, OpenLoop: f.openLoop, Fast: f.fast, DurationS: f.durationS,
		CapturePath: capture, Progress: prog.update,
	})
	prog.done()
	if err != nil {
		return nil, err
	}
	printSimSummary(stdout, res)
	return res, nil
}

func printSimSummary(w io.Writer, r *client.SimResult) {
	rtt := client.SpreadOf(r.RoundTripS, 1e3)
	fmt.Fprintf(w, "%s run: %d ticks\n", modeName(r.OpenLoop), r.Ticks)
	fmt.Fprintf(w, "  figure error vs reference: RMS %.2f mm, max %.2f mm\n", 1e3*r.RMSErrorM, 1e3*r.MaxErrorM)
	fmt.Fprintf(w, "  limit violations (independent check of %d commands): %d", r.Checker.Ticks(), r.Checker.Violations())
	if n := r.Checker.Violations(); n > 0 {
		fmt.Fprintf(w, " (position %d, velocity %d, acceleration %d, not finite %d); first: %v",
			r.Checker.Count(client.LimitPosition), r.Checker.Count(client.LimitVelocity),
			r.Checker.Count(client.LimitAcceleration), r.Checker.Count(client.LimitNotFinite), r.Checker.First()[0])
	}
	fmt.Fprintln(w)
	fmt.Fprintf(w, "  tick round trip: p50 %.3f ms, p99 %.3f ms, max %.3f ms\n", rtt.P50, rtt.P99, rtt.Max)
	fmt.Fprintf(w, "  guard acted on %d ticks; %d ticks carried a tick error\n", r.BoundedTicks, r.ErrorTicks)
	if r.CapturePath != "" {
		fmt.Fprintf(w, "  capture: %s\n", r.CapturePath)
	}
}

// progress shows a run's progress: one rewritten line on a terminal, a
// plain line per second of cue otherwise.
type progress struct {
	w        io.Writer
	tty      bool
	label    string
	lastLine float64
	shown    bool
}

func newProgress(w io.Writer, label string) *progress {
	return &progress{w: w, label: label, lastLine: -1e9, tty: isTerminal(w)}
}

func (p *progress) update(s client.SimProgress) {
	if p.tty {
		if s.Tick%10 != 0 {
			return
		}
		fmt.Fprintf(p.w, "\r%s  t %6.2f / %.2f s  %-8s  error %6.2f mm  violations %d ", p.label, s.CueTimeS, s.EndS, stateWord(s.State), 1e3*s.ErrorM, s.Violations)
		p.shown = true
		return
	}
	if s.CueTimeS-p.lastLine >= 1-1e-9 {
		p.lastLine = s.CueTimeS
		fmt.Fprintf(p.w, "%s t=%.2fs state=%s error_mm=%.2f violations=%d\n", p.label, s.CueTimeS, stateWord(s.State), 1e3*s.ErrorM, s.Violations)
	}
}

func (p *progress) done() {
	if p.tty && p.shown {
		fmt.Fprintln(p.w)
	}
}
