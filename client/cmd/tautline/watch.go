package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/signal"
	"time"

	"tautline/client"
	pb "tautline/proto/tautline/v1"
	"tautline/server"
)

func init() {
	register(&command{
		name:    "watch",
		summary: "a live status line for a cell on a running daemon",
		run:     runWatch,
	})
}

const watchHelp = `
Follows a cell's status on a running daemon (the WatchStatus stream) and shows
one line: the state and why, the cue and its time, ticks answered, the
tracking error (RMS distance of the markers in the latest tracker frame from
the cue's reference at the frame's capture time, in mm, with the number of
markers it covers; "-" before the cue has started or while no marker has been
seen), the solve time of the last tick and the largest so far, how many ticks
the guard enforced a bound on (and how many in the last update) and how many
bounds it enforced (in all and on the last tick), the rejected observations
(with how many in a row now), the ticks answered by a fallback (rejected
input, estimator or planner failure, stale feedback, coast) and how many times
the session entered coast. On a terminal the line is rewritten in place;
otherwise each update is a line.

Ends when the daemon ends the stream, after -count updates, or on Ctrl-C.`

func runWatch(args []string, stdout, stderr io.Writer) error {
	var d daemonFlags
	fs := newFlags("watch", "[flags] CELL_NAME", watchHelp, stderr)
	fs.StringVar(&d.addr, "addr", server.DefaultListen, "daemon address host:port")
	fs.StringVar(&d.caFile, "tls-ca", "", "CA bundle (PEM) the daemon's certificate must chain to (turns TLS on)")
	fs.StringVar(&d.certFile, "tls-cert", "", "client certificate (PEM)")
	fs.StringVar(&d.keyFile, "tls-key", "", "client private key (PEM)")
	interval := fs.Float64("interval-s", 0, "least time between updates that are not state changes, s (0: the daemon's default)")
	count := fs.Int("count", 0, "stop after this many updates (0: run until the stream ends)")
	args, err := parseInterspersed(fs, args)
	if err != nil {
		return err
	}
	if len(args) != 1 {
		fs.Usage()
		return fmt.Errorf("%w: want the name of one cell, got %d arguments", errUsage, len(args))
	}
	if d.addr == "" {
		return fmt.Errorf("%w: -addr is empty; watch needs a running daemon", errUsage)
	}
	if *interval < 0 || *count < 0 {
		return fmt.Errorf("%w: -interval-s and -count must not be negative", errUsage)
	}
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt)
	defer stop()
	conn, err := d.connect("", nil)
	if err != nil {
		return err
	}
	defer conn.Close()
	return watch(ctx, conn.Client, args[0], *interval, *count, stdout)
}

func watch(ctx context.Context, c *client.Client, cell string, intervalS float64, count int, stdout io.Writer) error {
	w, err := c.WatchStatus(ctx, cell, intervalS)
	if err != nil {
		return err
	}
	tty := isTerminal(stdout)
	var prevBounded uint64
	for n := 0; count == 0 || n < count; n++ {
		st, err := w.Next()
		if errors.Is(err, io.EOF) {
			if tty {
				fmt.Fprintln(stdout)
			}
			fmt.Fprintln(stdout, "the daemon ended the status stream")
			return nil
		}
		if errors.Is(err, context.Canceled) && ctx.Err() != nil {
			if tty {
				fmt.Fprintln(stdout)
			}
			return nil
		}
		if err != nil {
			return err
		}
		line := statusLine(st, st.GetBoundedTicks()-min(prevBounded, st.GetBoundedTicks()))
		prevBounded = st.GetBoundedTicks()
		if tty {
			fmt.Fprintf(stdout, "\r\033[K%s", line)
		} else {
			fmt.Fprintln(stdout, line)
		}
	}
	if tty {
		fmt.Fprintln(stdout)
	}
	return nil
}

// statusLine is one status as a line for an operator.
func statusLine(st *pb.CellStatus, newBounded uint64) string {
	since := ""
	if ns := st.GetStateSinceUnixNs(); ns > 0 {
		since = fmt.Sprintf(" %.0fs", time.Since(time.Unix(0, ns)).Seconds())
	}
	cue := "no cue"
	if st.GetCueName() != "" {
		cue = fmt.Sprintf("cue %s %.2f/%.2f s", st.GetCueName(), st.GetCueTimeS(), st.GetCueDurationS())
	}
	ctl := "controller connected"
	if !st.GetControllerConnected() {
		ctl = "no controller"
	}
	track := "tracking error -"
	if n := st.GetTrackingErrorMarkers(); n > 0 {
		track = fmt.Sprintf("tracking error %.2f mm (%d markers)", st.GetTrackingErrorM()*1e3, n)
	}
	return fmt.Sprintf("%s %s%s (%s) | %s | %s | ticks %d | %s | solve %.3f ms (max %.3f) | bounded ticks %d (+%d), bound actions %d (last tick %d) | rejected %d (%d in a row) | fallbacks %d | coast entries %d",
		st.GetCellName(), stateWord(st.GetState()), since, st.GetStateReason(), cue, ctl, st.GetTicks(), track,
		float64(st.GetLastSolveTimeUs())/1e3, float64(st.GetMaxSolveTimeUs())/1e3,
		st.GetBoundedTicks(), newBounded, st.GetBoundActions(), st.GetLastBoundActions(),
		st.GetRejectedTicks(), st.GetRejectedInRow(), st.GetFallbackTicks(), st.GetCoastEntries())
}

func isTerminal(w io.Writer) bool {
	f, ok := w.(*os.File)
	if !ok {
		return false
	}
	st, err := f.Stat()
	return err == nil && st.Mode()&os.ModeCharDevice != 0
}
