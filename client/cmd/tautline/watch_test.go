package main

import (
	"context"
	"regexp"
	"strings"
	"testing"
	"time"

	"tautline/client"
	pb "tautline/proto/tautline/v1"
)

func TestWatchShowsTheCellsStatus(t *testing.T) {
	dm, err := startDaemon(demoCell, t.TempDir(), nil)
	if err != nil {
		t.Fatal(err)
	}
	defer dm.stop()
	code, out, errOut := runCLI("watch", "-addr", dm.addr, "-count", "1", "demo-jellyfish")
	if code != 0 {
		t.Fatalf("exit %d\n%s\n%s", code, out, errOut)
	}
	for _, want := range []string{"demo-jellyfish idle", "no cue", "no controller", "ticks 0", "tracking error -", "bounded ticks 0 (+0)", "bound actions 0 (last tick 0)", "rejected 0 (0 in a row)", "fallbacks 0", "coast entries 0"} {
		if !strings.Contains(out, want) {
			t.Errorf("status line lacks %q: %q", want, out)
		}
	}
	// The status line of a live cell with a tracking error, from a status
	// made here: the daemon-run tests above cannot time one exactly.
	line := statusLine(&pb.CellStatus{CellName: "c", State: pb.SessionState_SESSION_STATE_COAST,
		TrackingErrorM: 0.00234, TrackingErrorMarkers: 5, FallbackTicks: 17, CoastEntries: 2,
		BoundedTicks: 9, BoundActions: 12, LastBoundActions: 3, RejectedTicks: 4, RejectedInRow: 1}, 2)
	for _, want := range []string{"c coast", "tracking error 2.34 mm (5 markers)", "bounded ticks 9 (+2), bound actions 12 (last tick 3)",
		"rejected 4 (1 in a row)", "fallbacks 17", "coast entries 2"} {
		if !strings.Contains(line, want) {
			t.Errorf("status line lacks %q: %q", want, line)
		}
	}
	if strings.Count(out, "\n") != 1 || strings.Contains(out, "\r") {
		t.Errorf("want exactly one plain line on a non-terminal, got %q", out)
	}

	code, _, errOut = runCLI("watch", "-addr", dm.addr, "-count", "1", "no-such-cell")
	if code != 1 || !strings.Contains(errOut, "not found") || !strings.Contains(errOut, "no-such-cell") {
		t.Errorf("unknown cell: exit %d, stderr %q", code, errOut)
	}
}

func TestWatchWithoutADaemon(t *testing.T) {
	code, _, errOut := runCLI("watch", "-addr", "127.0.0.1:1", "-count", "1", "demo-jellyfish")
	if code != 1 || !strings.Contains(errOut, "unavailable") {
		t.Errorf("no daemon: exit %d, stderr %q", code, errOut)
	}
}

// During a run the line shows the cell live with its controller, the cue
// and its time.
func TestWatchALiveRun(t *testing.T) {
	dm, err := startDaemon(demoCell, t.TempDir(), nil)
	if err != nil {
		t.Fatal(err)
	}
	defer dm.stop()
	in, err := loadSimInputs(demoCell, demoCue, "")
	if err != nil {
		t.Fatal(err)
	}
	c, err := client.Dial(dm.addr, client.DialSettings{})
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	done := make(chan error, 1)
	go func() {
		// Paced at the tick rate, so the run lasts the 2 s asked for.
		_, err := client.RunSimCell(context.Background(), c, client.SimSettings{Cell: in.cell, Cue: in.cue, CueCSV: in.cueCSV, CueName: "watched", DurationS: 2})
		done <- err
	}()
	deadline := time.Now().Add(5 * time.Second)
	for {
		st, err := c.Status(context.Background(), "demo-jellyfish")
		if err != nil {
			t.Fatal(err)
		}
		if st.GetState() == pb.SessionState_SESSION_STATE_LIVE {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("the cell never went live: %v", st)
		}
		time.Sleep(10 * time.Millisecond)
	}
	code, out, errOut := runCLI("watch", "-addr", dm.addr, "-count", "1", "demo-jellyfish")
	if code != 0 {
		t.Fatalf("exit %d\n%s\n%s", code, out, errOut)
	}
	for _, want := range []string{"demo-jellyfish live", "cue watched ", "/12.00 s", "controller connected"} {
		if !strings.Contains(out, want) {
			t.Errorf("status line lacks %q: %q", want, out)
		}
	}
	if !regexp.MustCompile(`live \d+s \([^)]+\)`).MatchString(out) {
		t.Errorf("status line gives no reason for the state: %q", out)
	}
	if !regexp.MustCompile(`\| tracking error (-|\d+\.\d\d mm \(\d+ markers\)) \|`).MatchString(out) {
		t.Errorf("status line shows no tracking error: %q", out)
	}
	if !regexp.MustCompile(`\| fallbacks \d+ \| coast entries \d+$`).MatchString(strings.TrimSpace(out)) {
		t.Errorf("status line shows no fallbacks and coast entries: %q", out)
	}
	if err := <-done; err != nil {
		t.Fatal(err)
	}
}
