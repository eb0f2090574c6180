package main

import (
	"context"
	"fmt"
	"io"
	"os"
	"os/signal"
	"path/filepath"
	"strings"
	"text/tabwriter"

	"tautline/client"
)

func init() {
	register(&command{
		name:    "replay",
		summary: "dry-run a capture through a daemon and compare the commands",
		run:     runReplay,
	})
}

const replayHelp = `
Streams a capture's observations to a daemon, at the recorded timing or as
fast as it answers (-fast), and compares the daemon's commands with the
recorded ones: the largest and the RMS difference of each joint's target,
ticks whose state differs, ticks on which the guard acted, and the latency.
The cue embedded in the capture is loaded and armed, and started just before
the tick the recording first answered live.

Without -addr a daemon is started in this process serving the cell embedded
in the capture (its files are written to a temporary directory). The core is
deterministic, so a fresh daemon of the same build reproduces the recorded
commands to the last bit, unless its time budget cut the planner's work
differently in the two runs: record and replay with a -prepare-budget-s
larger than any tick needs to rule that out.

Every replayed command is checked against the joint limits by the independent
checker. Exits 1 when -max-diff is set and exceeded, or on a violation.`

func runReplay(args []string, stdout, stderr io.Writer) error {
	var d daemonFlags
	fs := newFlags("replay", "[flags] CAPTURE", replayHelp, stderr)
	d.bind(fs, "start a daemon in this process serving the capture's cell")
	fast := fs.Bool("fast", false, "send each observation as soon as the previous command is back")
	maxDiff := fs.Float64("max-diff", 0, "fail if any joint target differs from the recording by more than this, rad (0: report only)")
	args, err := parseInterspersed(fs, args)
	if err != nil {
		return err
	}
	if len(args) != 1 {
		fs.Usage()
		return fmt.Errorf("%w: want one capture file, got %d arguments", errUsage, len(args))
	}
	if *maxDiff < 0 {
		return fmt.Errorf("%w: -max-diff %v is negative", errUsage, *maxDiff)
	}
	run, err := client.ReadCaptureRun(args[0])
	if err != nil {
		return err
	}
	if run.Damage != nil {
		fmt.Fprintf(stderr, "tautline replay: %s: %v; replaying the records before it\n", args[0], run.Damage)
	}
	if run.LiveFrom < 0 {
		return fmt.Errorf("%s: the recorded session never went live; nothing to replay", args[0])
	}
	cellPath := ""
	if d.addr == "" {
		dir, err := os.MkdirTemp("", "tautline-replay-")
		if err != nil {
			return err
		}
		defer os.RemoveAll(dir)
		if cellPath, err = writeEmbedded(dir, run.Embedded); err != nil {
			return fmt.Errorf("%s: %w", args[0], err)
		}
	}
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt)
	defer stop()
	conn, err := d.connect(cellPath, nil)
	if err != nil {
		return err
	}
	defer conn.Close()
	res, err := client.Replay(ctx, conn.Client, run, client.ReplaySettings{Fast: *fast})
	if err != nil {
		return err
	}
	printReplay(stdout, run, res)
	if n := res.Checker.Violations(); n > 0 {
		return fmt.Errorf("%d joint limit violations in the replayed commands; first: %v", n, res.Checker.First()[0])
	}
	if *maxDiff > 0 && res.MaxAbsDiff() > *maxDiff {
		return fmt.Errorf("replayed commands differ from the recording by up to %.3g rad, more than -max-diff %.3g", res.MaxAbsDiff(), *maxDiff)
	}
	return nil
}

// writeEmbedded writes a capture's embedded files under dir, keeping their
// layout relative to the cell file (which the cell file's references need),
// and returns the cell file's path there.
func writeEmbedded(dir string, e *client.Embedded) (string, error) {
	cellDir := filepath.Dir(filepath.FromSlash(e.CellName))
	rels := map[string]string{}
	depth := 0
	for name := range e.Files {
		rel, err := filepath.Rel(cellDir, filepath.FromSlash(name))
		if err != nil {
			return "", fmt.Errorf("embedded file %q cannot be placed relative to the cell file %q: %v", name, e.CellName, err)
		}
		up := 0
		for _, part := range strings.Split(rel, string(filepath.Separator)) {
			if part != ".." {
				break
			}
			up++
		}
		depth = max(depth, up)
		rels[name] = rel
	}
	// Files above the cell's directory need that many levels above it.
	base := dir
	for i := 0; i < depth; i++ {
		base = filepath.Join(base, fmt.Sprintf("up%d", i))
	}
	for name, rel := range rels {
		path := filepath.Join(base, rel)
		if !strings.HasPrefix(path, filepath.Clean(dir)+string(filepath.Separator)) {
			return "", fmt.Errorf("embedded file name %q leaves the replay directory", name)
		}
		if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
			return "", err
		}
		if err := os.WriteFile(path, e.Files[name], 0o644); err != nil {
			return "", err
		}
	}
	return filepath.Join(base, rels[e.CellName]), nil
}

func printReplay(w io.Writer, run *client.CaptureRun, r *client.ReplayResult) {
	fmt.Fprintf(w, "replayed %s: %d ticks sent, %d compared with the recording\n", run.Path, r.Ticks, r.Compared)
	tw := tabwriter.NewWriter(w, 2, 8, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "  joint\tmax diff (rad)\tRMS diff (rad)\t")
	for j, name := range run.Cell.JointNames() {
		fmt.Fprintf(tw, "  %s\t%.3g\t%.3g\t\n", name, r.MaxDiff[j], r.RMSDiff[j])
	}
	tw.Flush()
	fmt.Fprintf(w, "  largest difference: %.3g rad; ticks in a different state: %d\n", r.MaxAbsDiff(), r.StateMismatches)
	fmt.Fprintf(w, "  guard acted on %d ticks (recorded %d); limit violations (independent check): %d\n", r.ReplayedBoundTicks, r.RecordedBoundTicks, r.Checker.Violations())
	now, was := client.SpreadOf(r.RoundTripS, 1e3), client.SpreadOf(r.RecordedLatencyS, 1e3)
	fmt.Fprintf(w, "  latency: replay round trip p50 %.3f ms, p99 %.3f ms, max %.3f ms; recorded p50 %.3f ms, p99 %.3f ms, max %.3f ms\n",
		now.P50, now.P99, now.Max, was.P50, was.P99, was.Max)
}
