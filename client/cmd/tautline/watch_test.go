package main

import (
	"strings"
	"testing"
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
