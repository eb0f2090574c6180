package main

import (
	"encoding/json"
	"fmt"
	"image/color"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/vg"

	"tautline/client"
)

func init() {
	register(&command{
		name:    "report",
		summary: "draw a capture's tracking error, joint targets and latency",
		run:     runReport,
	})
}

const reportHelp = `
Reads one or more captures (of 'tautline sim' or of the daemon) and writes,
into DIR, pictures as PNG and SVG and a summary.json:

  tracking_error   the figure error over cue time as the tracker saw it: the
                   RMS over visible markers of the distance from the
                   reference (the cue simulated on the cell's nominal model),
                   mm; every capture on one plot (open- and closed-loop
                   together when both are given)
  joints-<run>     each joint's commanded target against the cue's nominal,
                   with the joint's position limits shaded where they are
                   in view
  latency          histogram of the time from each observation to its
                   command as recorded (a sim capture: the controller's round
                   trip; a daemon capture: the daemon's compute time), ms

The observed error includes the tracker's noise and is measured only on
visible markers; 'tautline sim' prints the true error of a simulated run.
Every command is also checked against the joint limits by the independent
checker; summary.json counts the violations.`

func runReport(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("report", "--out DIR CAPTURE...", reportHelp, stderr)
	out := fs.String("out", "", "directory to write the report into (created if missing; required)")
	args, err := parseInterspersed(fs, args)
	if err != nil {
		return err
	}
	if *out == "" {
		fs.Usage()
		return fmt.Errorf("%w: -out DIR is required", errUsage)
	}
	if len(args) == 0 {
		fs.Usage()
		return fmt.Errorf("%w: name at least one capture file", errUsage)
	}
	var runs []*client.CaptureRun
	for _, path := range args {
		r, err := client.ReadCaptureRun(path)
		if err != nil {
			return err
		}
		if r.Damage != nil {
			fmt.Fprintf(stderr, "tautline report: %s: %v; reporting the records before it\n", path, r.Damage)
		}
		runs = append(runs, r)
	}
	sum, files, err := writeReport(*out, runs)
	if err != nil {
		return err
	}
	printReportSummary(stdout, sum)
	for _, f := range files {
		fmt.Fprintln(stdout, "  wrote", f)
	}
	return nil
}

// reportRun is one capture in the report's summary.json.
type reportRun struct {
	Label             string        `json:"label"`
	Capture           string        `json:"capture"`
	Recorder          string        `json:"recorder"`
	Cell              string        `json:"cell"`
	Cue               string        `json:"cue"`
	Ticks             int           `json:"ticks"`
	LiveTicks         int           `json:"live_ticks"`
	ObservedRMSErrorM float64       `json:"observed_rms_error_m"`
	ObservedMaxErrorM float64       `json:"observed_max_error_m"`
	BoundViolations   int           `json:"bound_violations"`
	GuardActedTicks   int           `json:"guard_acted_ticks"`
	TickErrorTicks    int           `json:"tick_error_ticks"`
	RecordedLatencyMs client.Spread `json:"recorded_latency_ms"`
	DaemonSolveTimeMs client.Spread `json:"daemon_solve_time_ms"`
	TornTail          bool          `json:"torn_tail"`
}

type reportSummary struct {
	Runs []reportRun `json:"runs"`
	// ObservedImprovementRatio is closed-loop ÷ open-loop observed RMS
	// error, when both runs are given.
	ObservedImprovementRatio *float64 `json:"observed_improvement_ratio,omitempty"`
}

func summarizeRun(r *client.CaptureRun) reportRun {
	_, errM := r.ObservedError()
	chk := r.CheckLimits()
	rr := reportRun{
		Label: r.Label(), Capture: r.Path, Recorder: r.Start.GetRecorder(),
		Cell: r.Cell.Name, Cue: r.Embedded.CueName, Ticks: len(r.Ticks),
		ObservedRMSErrorM: client.RMS(errM), BoundViolations: chk.Violations(),
		RecordedLatencyMs: client.SpreadOf(r.RecordedLatencyS(), 1e3), TornTail: r.Damage != nil,
	}
	for _, e := range errM {
		rr.ObservedMaxErrorM = math.Max(rr.ObservedMaxErrorM, e)
	}
	var solve []float64
	for i, tk := range r.Ticks {
		if tk.Cmd == nil {
			continue
		}
		if r.LiveFrom >= 0 && i >= r.LiveFrom {
			rr.LiveTicks++
		}
		solve = append(solve, float64(tk.Cmd.GetSolveTimeUs()))
		if len(tk.Cmd.GetBoundsActed()) > 0 {
			rr.GuardActedTicks++
		}
		if tk.Cmd.GetError() != nil {
			rr.TickErrorTicks++
		}
	}
	rr.DaemonSolveTimeMs = client.SpreadOf(solve, 1e-3)
	return rr
}

// writeReport draws the plots of runs into dir and writes summary.json.
func writeReport(dir string, runs []*client.CaptureRun) (*reportSummary, []string, error) {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, nil, err
	}
	sum := &reportSummary{}
	var open, closed *reportRun
	for _, r := range runs {
		sum.Runs = append(sum.Runs, summarizeRun(r))
	}
	for i := range sum.Runs {
		switch sum.Runs[i].Label {
		case "open-loop":
			open = &sum.Runs[i]
		case "closed-loop":
			closed = &sum.Runs[i]
		}
	}
	if open != nil && closed != nil && open.ObservedRMSErrorM > 0 {
		ratio := closed.ObservedRMSErrorM / open.ObservedRMSErrorM
		sum.ObservedImprovementRatio = &ratio
	}
	var files []string
	add := func(fs []string, err error) error {
		files = append(files, fs...)
		return err
	}

	var errSeries []series
	var labels []string
	var latencies [][]float64
	for _, r := range runs {
		t, e := r.ObservedError()
		errSeries = append(errSeries, series{label: r.Label(), x: t, y: scaled(e, 1e3)})
		labels = append(labels, r.Label())
		latencies = append(latencies, scaled(r.RecordedLatencyS(), 1e3))
	}
	p, err := linePlot("Figure error seen by the tracker", "cue time (s)", "RMS marker distance from reference (mm)", errSeries)
	if err != nil {
		return nil, files, err
	}
	if err := add(savePlot(p, dir, "tracking_error", 18*vg.Centimeter, 10*vg.Centimeter)); err != nil {
		return nil, files, err
	}
	for _, r := range runs {
		if err := add(jointPlots(dir, r)); err != nil {
			return nil, files, err
		}
	}
	hp, err := histogram("Observation to command, as recorded", "time (ms)", labels, latencies, 40)
	if err != nil {
		return nil, files, err
	}
	if err := add(savePlot(hp, dir, "latency", 16*vg.Centimeter, 9*vg.Centimeter)); err != nil {
		return nil, files, err
	}
	js, err := json.MarshalIndent(sum, "", "  ")
	if err != nil {
		return nil, files, err
	}
	path := filepath.Join(dir, "summary.json")
	if err := os.WriteFile(path, append(js, '\n'), 0o644); err != nil {
		return nil, files, err
	}
	return sum, append(files, path), nil
}

func scaled(xs []float64, k float64) []float64 {
	out := make([]float64, len(xs))
	for i, x := range xs {
		out[i] = k * x
	}
	return out
}

// jointPlots draws each joint's targets against the nominal, one tile per
// joint, arms side by side.
func jointPlots(dir string, r *client.CaptureRun) ([]string, error) {
	nq := r.Cell.NumJoints()
	if r.LiveFrom < 0 || nq == 0 {
		return nil, nil
	}
	var ts []float64
	targets := make([][]float64, nq)
	nominal := make([][]float64, nq)
	qn := make([]float64, nq)
	for _, tk := range r.Ticks[r.LiveFrom:] {
		if tk.Cmd == nil || len(tk.Cmd.GetNext().GetPositions()) != nq {
			continue
		}
		t := r.CueTimeS(tk.Obs.GetCueTimeS()) + r.Cell.TickS
		if t > r.Cue.EndS()+1e-9 {
			break
		}
		ts = append(ts, t)
		r.Cue.PositionTo(qn, t)
		for j, v := range tk.Cmd.GetNext().GetPositions() {
			targets[j] = append(targets[j], v)
			nominal[j] = append(nominal[j], qn[j])
		}
	}
	if len(ts) == 0 {
		return nil, nil
	}
	cols := max(1, len(r.Cell.Arms))
	rows := 0
	for _, a := range r.Cell.Arms {
		rows = max(rows, len(a.Limits))
	}
	grid := make([][]*plot.Plot, rows)
	for i := range grid {
		grid[i] = make([]*plot.Plot, cols)
	}
	lim := r.Cell.JointLimits()
	for ai, a := range r.Cell.Arms {
		for k := range a.Limits {
			j := a.Offset + k
			p, err := linePlot(lim[j].Name, "cue time (s)", "rad", []series{
				{label: "nominal", x: ts, y: nominal[j], dashed: true},
				{label: r.Label(), x: ts, y: targets[j]},
			})
			if err != nil {
				return nil, err
			}
			lo, hi := minMax(nominal[j], targets[j])
			span := math.Max(hi-lo, 0.05)
			viewLo, viewHi := lo-0.5*span, hi+0.5*span
			shade := color.NRGBA{R: 220, G: 40, B: 40, A: 60}
			inView := 0
			if lim[j].Lower > viewLo {
				b, _ := band(ts[0], ts[len(ts)-1], viewLo, lim[j].Lower, shade)
				p.Add(b)
				inView++
			}
			if lim[j].Upper < viewHi {
				b, _ := band(ts[0], ts[len(ts)-1], lim[j].Upper, viewHi, shade)
				p.Add(b)
				inView++
			}
			p.Y.Min, p.Y.Max = viewLo, viewHi
			if inView == 0 {
				p.Title.Text = fmt.Sprintf("%s (limits %.2f…%.2f out of view)", lim[j].Name, lim[j].Lower, lim[j].Upper)
			}
			p.Title.TextStyle.Font.Size = vg.Points(9)
			p.Legend.TextStyle.Font.Size = vg.Points(7)
			grid[k][ai] = p
		}
	}
	name := "joints-" + safeFileName(r.Label())
	return saveTiles(grid, dir, name, 9*vg.Centimeter*vg.Length(cols), 4.2*vg.Centimeter*vg.Length(rows))
}

func minMax(a, b []float64) (lo, hi float64) {
	lo, hi = math.Inf(1), math.Inf(-1)
	for _, s := range [][]float64{a, b} {
		for _, v := range s {
			lo, hi = math.Min(lo, v), math.Max(hi, v)
		}
	}
	return lo, hi
}

func safeFileName(s string) string {
	return strings.Map(func(r rune) rune {
		switch {
		case r >= 'a' && r <= 'z', r >= 'A' && r <= 'Z', r >= '0' && r <= '9', r == '-', r == '_', r == '.':
			return r
		}
		return '_'
	}, s)
}

func printReportSummary(w io.Writer, s *reportSummary) {
	for _, r := range s.Runs {
		fmt.Fprintf(w, "%s (%s): %d ticks, observed RMS error %.2f mm, %d limit violations, recorded latency p50 %.3f ms p99 %.3f ms\n",
			r.Label, r.Capture, r.Ticks, 1e3*r.ObservedRMSErrorM, r.BoundViolations, r.RecordedLatencyMs.P50, r.RecordedLatencyMs.P99)
	}
	if s.ObservedImprovementRatio != nil {
		fmt.Fprintf(w, "observed improvement ratio (closed ÷ open): %.3f\n", *s.ObservedImprovementRatio)
	}
}
