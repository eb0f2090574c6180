package main

import (
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"

	"google.golang.org/protobuf/proto"

	"tautline/proto/capture"
	pb "tautline/proto/tautline/v1"
)

// recordShortRun records 1.5 s of the demo cue with the standard profile
// against an in-process daemon whose prepare budget is large enough never
// to cut the planner short.
func recordShortRun(t *testing.T) string {
	t.Helper()
	path := filepath.Join(t.TempDir(), "closed.tlcap")
	code, out, errOut := runCLI("sim", "-fast", "-duration-s", "1.5", "-prepare-budget-s", "10",
		"-profile", demoProfile, "-capture", path, demoCell, demoCue)
	if code != 0 {
		t.Fatalf("sim exit %d\n%s\n%s", code, out, errOut)
	}
	return path
}

// The core is deterministic: a fresh daemon of the same build, fed the
// recorded observations with Start at the same tick, answers with the
// recorded commands bit for bit.
func TestReplayReproducesTheRecording(t *testing.T) {
	path := recordShortRun(t)
	code, out, errOut := runCLI("replay", "-fast", "-prepare-budget-s", "10", "-max-diff", "1e-300", path)
	// -max-diff 1e-300 fails for any non-zero difference.
	if code != 0 {
		t.Fatalf("replay exit %d\n%s\n%s", code, out, errOut)
	}
	for _, want := range []string{"largest difference: 0 rad", "ticks in a different state: 0", "limit violations (independent check): 0"} {
		if !strings.Contains(out, want) {
			t.Errorf("replay output lacks %q:\n%s", want, out)
		}
	}
	m := regexp.MustCompile(`(\d+) ticks sent, (\d+) compared`).FindStringSubmatch(out)
	if m == nil || m[1] != m[2] {
		t.Fatalf("not every tick compared:\n%s", out)
	}
	if n, _ := strconv.Atoi(m[1]); n != 153 {
		t.Errorf("%d ticks replayed, want 153 (3 standby + 150 live)", n)
	}
}

// The comparison is not blind: a capture with one recorded target moved
// by 1 mrad replays with exactly that difference, and -max-diff fails.
func TestReplayFindsATamperedCommand(t *testing.T) {
	path := recordShortRun(t)
	recs, _, err := capture.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	tampered := filepath.Join(t.TempDir(), "tampered.tlcap")
	w, err := capture.Create(tampered, capture.Settings{FlushInterval: -1})
	if err != nil {
		t.Fatal(err)
	}
	const shift = 1e-3
	done := false
	for _, rec := range recs {
		if c := rec.GetCommand(); c != nil && c.GetTickSeq() == 100 && !done {
			rec = proto.Clone(rec).(*pb.Record)
			rec.GetCommand().GetNext().Positions[4] += shift
			done = true
		}
		if err := w.Write(rec); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	if !done {
		t.Fatal("no command for tick 100 in the recording")
	}
	code, out, errOut := runCLI("replay", "-fast", "-prepare-budget-s", "10", "-max-diff", "1e-6", tampered)
	if code != 1 || !strings.Contains(errOut, "more than -max-diff") {
		t.Errorf("tampered capture: exit %d, stderr %q; want exit 1 naming -max-diff", code, errOut)
	}
	m := regexp.MustCompile(`left\.j5\s+(\S+)`).FindStringSubmatch(out)
	if m == nil {
		t.Fatalf("no left.j5 row:\n%s", out)
	}
	// Printed with 3 significant digits: 0.001.
	if d, _ := strconv.ParseFloat(m[1], 64); d != shift {
		t.Errorf("left.j5 max difference %v, want %v", d, shift)
	}
}
