package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"os/signal"
	"path/filepath"
	"runtime"
	"text/tabwriter"
	"time"

	"gonum.org/v1/plot/vg"

	"tautline/client"
)

func init() {
	register(&command{
		name:    "demo",
		summary: "open loop against closed loop on the invented demo cell, with a report",
		run:     runDemo,
	})
}

const demoHelp = `
The first thing to run. From the repository root, on built-in defaults only:
starts a daemon in this process on a free loopback port serving the invented
demo cell (testdata/demo), then runs the simulated cell with the standard
mismatch profile twice on the same cue and the same disturbances: first
open-loop (the nominal cue played as prepared, today's practice), then
closed-loop (the daemon's corrections applied). It writes into DIR:

  open-loop.tlcap, closed-loop.tlcap   what the simulated cell sent and got
  daemon-captures/                     the daemon's own captures
  tracking_error.png/.svg              the true figure error of both runs
  report/                              'tautline report' of both captures
  summary.json                         the figures below, SI units

and prints them side by side. The figure error is the RMS over markers of
the distance between the simulated figure's true marker nodes and the
reference (the cue simulated on the cell's nominal model from rest). Tick
latency is the controller's round trip over loopback gRPC, observation sent
to command received. The targets are an improvement ratio (closed ÷ open)
of at most 0.3, no limit violation, and a latency p99 of at most 2 ms; the
summary says plainly whether each was met.

Files the demo wrote before in DIR are replaced.`

type demoFlags struct {
	out                string
	cell, cue, profile string
	durationS          float64
	fast               bool
	prepareBudgetS     float64
}

func runDemo(args []string, stdout, stderr io.Writer) error {
	var f demoFlags
	fs := newFlags("demo", "[--out DIR]", demoHelp, stderr)
	fs.StringVar(&f.out, "out", "demo-out", "directory to write into (created if missing)")
	fs.Float64Var(&f.durationS, "duration-s", 0, "play only this much of the cue, s (0: all of it; tests use a few seconds)")
	fs.BoolVar(&f.fast, "fast", false, "run as fast as the daemon answers instead of at the tick rate (latency then includes the prepare phase the daemon otherwise does between ticks)")
	fs.Float64Var(&f.prepareBudgetS, "prepare-budget-s", 0, "the daemon's planner prepare budget per tick, s (0: the daemon's default; a large value makes runs repeat bit for bit)")
	fs.StringVar(&f.cell, "cell", "testdata/demo/cell.json", "demo cell file")
	fs.StringVar(&f.cue, "cue", "testdata/demo/cue.csv", "demo cue file")
	fs.StringVar(&f.profile, "profile", "testdata/demo/standard.mismatch.json", "mismatch profile")
	args, err := parseInterspersed(fs, args)
	if err != nil {
		return err
	}
	if len(args) != 0 {
		fs.Usage()
		return fmt.Errorf("%w: demo takes no arguments (got %q)", errUsage, args)
	}
	if f.durationS < 0 || f.prepareBudgetS < 0 {
		return fmt.Errorf("%w: -duration-s and -prepare-budget-s must not be negative", errUsage)
	}
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt)
	defer stop()
	_, err = demo(ctx, &f, stdout)
	return err
}

// demoRun is one run in summary.json.
type demoRun struct {
	RMSErrorM         float64        `json:"rms_error_m"`
	MaxErrorM         float64        `json:"max_error_m"`
	BoundViolations   int            `json:"bound_violations"`
	ViolationsByKind  map[string]int `json:"bound_violations_by_kind"`
	TickLatencyMs     client.Spread  `json:"tick_latency_ms"`
	DaemonSolveTimeMs client.Spread  `json:"daemon_solve_time_ms"`
	GuardActedTicks   int            `json:"guard_acted_ticks"`
	TickErrorTicks    int            `json:"tick_error_ticks"`
	Ticks             int            `json:"ticks"`
	Capture           string         `json:"capture"`
}

type demoSummary struct {
	Format           string  `json:"format"`
	Note             string  `json:"note"`
	Ticks            int     `json:"ticks"`
	TickPeriodS      float64 `json:"tick_period_s"`
	DurationS        float64 `json:"duration_s"`
	Cell             string  `json:"cell"`
	Cue              string  `json:"cue"`
	Profile          string  `json:"profile"`
	Paced            bool    `json:"paced_at_tick_rate"`
	OpenLoop         demoRun `json:"open_loop"`
	ClosedLoop       demoRun `json:"closed_loop"`
	ImprovementRatio float64 `json:"improvement_ratio"`
	Targets          struct {
		ImprovementRatioAtMost float64 `json:"improvement_ratio_at_most"`
		BoundViolations        int     `json:"bound_violations"`
		TickLatencyP99MsAtMost float64 `json:"tick_latency_p99_ms_at_most"`
	} `json:"targets"`
	Met struct {
		ImprovementRatio bool `json:"improvement_ratio"`
		BoundViolations  bool `json:"bound_violations"`
		TickLatencyP99   bool `json:"tick_latency_p99"`
	} `json:"met"`
	Machine struct {
		GOOS      string `json:"goos"`
		GOARCH    string `json:"goarch"`
		NumCPU    int    `json:"num_cpu"`
		GoVersion string `json:"go_version"`
	} `json:"machine"`
	WallTimeS float64 `json:"wall_time_s"`
}

func demoRunOf(r *client.SimResult, capturePath string) demoRun {
	solve := make([]float64, len(r.SolveUs))
	for i, us := range r.SolveUs {
		solve[i] = float64(us)
	}
	c := r.Checker
	return demoRun{
		RMSErrorM: r.RMSErrorM, MaxErrorM: r.MaxErrorM,
		BoundViolations: c.Violations(),
		ViolationsByKind: map[string]int{
			"position": c.Count(client.LimitPosition), "velocity": c.Count(client.LimitVelocity),
			"acceleration": c.Count(client.LimitAcceleration), "not_finite": c.Count(client.LimitNotFinite),
		},
		TickLatencyMs:     client.SpreadOf(r.RoundTripS, 1e3),
		DaemonSolveTimeMs: client.SpreadOf(solve, 1e-3),
		GuardActedTicks:   r.BoundedTicks, TickErrorTicks: r.ErrorTicks, Ticks: r.Ticks,
		Capture: capturePath,
	}
}

func demo(ctx context.Context, f *demoFlags, stdout io.Writer) (*demoSummary, error) {
	wall := time.Now()
	in, err := loadSimInputs(f.cell, f.cue, f.profile)
	if err != nil {
		if errors.Is(err, fs.ErrNotExist) {
			return nil, fmt.Errorf("%w (the demo reads testdata/demo: run it from the repository root, or name the files with -cell, -cue and -profile)", err)
		}
		return nil, err
	}
	if err := os.MkdirAll(f.out, 0o755); err != nil {
		return nil, err
	}
	daemonDir := filepath.Join(f.out, "daemon-captures")
	for _, old := range []string{"open-loop.tlcap", "closed-loop.tlcap", "daemon-captures", "report"} {
		if err := os.RemoveAll(filepath.Join(f.out, old)); err != nil {
			return nil, err
		}
	}
	fmt.Fprintf(stdout, "tautline demo: cell %q; cue %s (%.1f s); profile %s\n", in.cell.Name, f.cue, in.cue.DurationS(), f.profile)

	results := map[bool]*client.SimResult{}
	for _, open := range []bool{true, false} {
		mode := modeName(open)
		res, err := demoRun1(ctx, f, in, open, daemonDir, stdout)
		if err != nil {
			return nil, fmt.Errorf("%s run: %w", mode, err)
		}
		results[open] = res
	}
	open, closed := results[true], results[false]

	s := &demoSummary{
		Format: "tautline.demo-summary/1",
		Note:   "invented demo cell, cue and mismatch profile (testdata/README.md); error against the cue simulated on the nominal model; latency is the controller's loopback gRPC round trip",
		Ticks:  closed.Ticks, TickPeriodS: in.cell.TickS, DurationS: float64(closed.Ticks) * in.cell.TickS,
		Cell: f.cell, Cue: f.cue, Profile: f.profile, Paced: !f.fast,
		OpenLoop:   demoRunOf(open, filepath.Join(f.out, "open-loop.tlcap")),
		ClosedLoop: demoRunOf(closed, filepath.Join(f.out, "closed-loop.tlcap")),
	}
	if open.RMSErrorM > 0 {
		s.ImprovementRatio = closed.RMSErrorM / open.RMSErrorM
	}
	s.Targets.ImprovementRatioAtMost, s.Targets.BoundViolations, s.Targets.TickLatencyP99MsAtMost = 0.3, 0, 2
	s.Met.ImprovementRatio = s.ImprovementRatio > 0 && s.ImprovementRatio <= 0.3
	s.Met.BoundViolations = s.ClosedLoop.BoundViolations == 0 && s.OpenLoop.BoundViolations == 0
	s.Met.TickLatencyP99 = s.ClosedLoop.TickLatencyMs.P99 <= 2
	s.Machine.GOOS, s.Machine.GOARCH, s.Machine.NumCPU, s.Machine.GoVersion = runtime.GOOS, runtime.GOARCH, runtime.NumCPU(), runtime.Version()

	// Pictures: the true error of both runs, then the report of both
	// captures.
	p, err := linePlot("Figure error against the reference (simulated truth)", "cue time (s)", "RMS marker distance (mm)", []series{
		{label: "open-loop", x: open.TimeS, y: scaled(open.ErrorM, 1e3)},
		{label: "closed-loop", x: closed.TimeS, y: scaled(closed.ErrorM, 1e3)},
	})
	if err != nil {
		return nil, err
	}
	if _, err := savePlot(p, f.out, "tracking_error", 18*vg.Centimeter, 10*vg.Centimeter); err != nil {
		return nil, err
	}
	var runs []*client.CaptureRun
	for _, path := range []string{s.OpenLoop.Capture, s.ClosedLoop.Capture} {
		r, err := client.ReadCaptureRun(path)
		if err != nil {
			return nil, err
		}
		runs = append(runs, r)
	}
	if _, _, err := writeReport(filepath.Join(f.out, "report"), runs); err != nil {
		return nil, err
	}
	s.WallTimeS = time.Since(wall).Seconds()
	js, err := json.MarshalIndent(s, "", "  ")
	if err != nil {
		return nil, err
	}
	if err := os.WriteFile(filepath.Join(f.out, "summary.json"), append(js, '\n'), 0o644); err != nil {
		return nil, err
	}
	printDemoTable(stdout, s)
	fmt.Fprintf(stdout, "wrote %s (summary.json, tracking_error.png, report/, captures) in %.1f s\n", f.out, s.WallTimeS)
	return s, nil
}

// demoRun1 runs the simulated cell once against a daemon of its own, so
// that both runs meet a daemon in the same state (fresh, idle, no guard
// history) and differ only in whether the corrections are applied.
func demoRun1(ctx context.Context, f *demoFlags, in *simInputs, open bool, daemonDir string, stdout io.Writer) (*client.SimResult, error) {
	mode := modeName(open)
	dm, err := startDaemon(f.cell, daemonDir, withPrepareBudget(f.prepareBudgetS))
	if err != nil {
		return nil, err
	}
	defer dm.stop()
	c, err := client.Dial(dm.addr, client.DialSettings{})
	if err != nil {
		return nil, err
	}
	defer c.Close()
	fmt.Fprintf(stdout, "%s: in-process daemon on %s\n", mode, dm.addr)
	prog := newProgress(stdout, mode)
	res, err := client.RunSimCell(ctx, c, client.SimSettings{
		Cell: in.cell, Cue: in.cue, CueCSV: in.cueCSV, CueName: "demo-" + mode, CueFileName: f.cue,
		Profile: in.profile, OpenLoop: open, Fast: f.fast, DurationS: f.durationS,
		CapturePath: filepath.Join(f.out, mode+".tlcap"), Progress: prog.update,
	})
	prog.done()
	return res, err
}

func printDemoTable(w io.Writer, s *demoSummary) {
	fmt.Fprintf(w, "\n%d ticks of %.0f ms, standard mismatch profile, %d CPUs\n", s.Ticks, 1e3*s.TickPeriodS, s.Machine.NumCPU)
	tw := tabwriter.NewWriter(w, 2, 8, 2, ' ', 0)
	fmt.Fprintln(tw, "\topen-loop\tclosed-loop\t")
	fmt.Fprintf(tw, "RMS figure error\t%.1f mm\t%.1f mm\t\n", 1e3*s.OpenLoop.RMSErrorM, 1e3*s.ClosedLoop.RMSErrorM)
	fmt.Fprintf(tw, "max figure error\t%.1f mm\t%.1f mm\t\n", 1e3*s.OpenLoop.MaxErrorM, 1e3*s.ClosedLoop.MaxErrorM)
	fmt.Fprintf(tw, "limit violations\t%d\t%d\t\n", s.OpenLoop.BoundViolations, s.ClosedLoop.BoundViolations)
	fmt.Fprintf(tw, "tick latency p50 / p99 / max\t%.2f / %.2f / %.2f ms\t%.2f / %.2f / %.2f ms\t\n",
		s.OpenLoop.TickLatencyMs.P50, s.OpenLoop.TickLatencyMs.P99, s.OpenLoop.TickLatencyMs.Max,
		s.ClosedLoop.TickLatencyMs.P50, s.ClosedLoop.TickLatencyMs.P99, s.ClosedLoop.TickLatencyMs.Max)
	fmt.Fprintf(tw, "daemon solve time p50 / p99 / max\t%.2f / %.2f / %.2f ms\t%.2f / %.2f / %.2f ms\t\n",
		s.OpenLoop.DaemonSolveTimeMs.P50, s.OpenLoop.DaemonSolveTimeMs.P99, s.OpenLoop.DaemonSolveTimeMs.Max,
		s.ClosedLoop.DaemonSolveTimeMs.P50, s.ClosedLoop.DaemonSolveTimeMs.P99, s.ClosedLoop.DaemonSolveTimeMs.Max)
	tw.Flush()
	yes := map[bool]string{true: "met", false: "NOT met"}
	fmt.Fprintf(w, "improvement ratio (closed ÷ open) %.3f: target ≤ 0.3 %s; violations: target 0 %s; latency p99 target ≤ 2 ms %s\n",
		s.ImprovementRatio, yes[s.Met.ImprovementRatio], yes[s.Met.BoundViolations], yes[s.Met.TickLatencyP99])
}
