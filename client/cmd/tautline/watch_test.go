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
	for _, want := range []string{"demo-jellyfish idle", "no cue", "no controller", "ticks 0", "bounds 0 (+0)", "fallbacks 0 (0 in a row)"} {
		if !strings.Contains(out, want) {
			t.Errorf("status line lacks %q: %q", want, out)
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
	if err := <-done; err != nil {
		t.Fatal(err)
	}
}
