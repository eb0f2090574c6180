package main

import (
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
)

// Half a second of the demo cue on a perfect plant (no profile): the sim
// command runs to the end, prints its summary with a plain progress line
// (not a terminal), and counts every command it checked.
func TestSimShortRun(t *testing.T) {
	capture := filepath.Join(t.TempDir(), "run.tlcap")
	code, out, errOut := runCLI("sim", "-fast", "-duration-s", "0.5", "-capture", capture, demoCell, demoCue)
	if code != 0 {
		t.Fatalf("exit %d\n%s\n%s", code, out, errOut)
	}
	for _, want := range []string{"closed-loop run: 50 ticks", "limit violations (independent check of", "tick round trip", "capture: " + capture, "closed-loop t="} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q:\n%s", want, out)
		}
	}
	if strings.Contains(out, "\r") {
		t.Error("progress rewrote a line on a non-terminal")
	}
	// 50 live ticks plus the 3 standby ticks before Start were checked.
	m := regexp.MustCompile(`independent check of (\d+) commands\): 0`).FindStringSubmatch(out)
	if m == nil {
		t.Fatalf("no violation count in:\n%s", out)
	}
	if n, _ := strconv.Atoi(m[1]); n != 53 {
		t.Errorf("%d commands checked, want 53 (3 standby + 50 live)", n)
	}
}

// The open-loop baseline on a perfect plant follows the nominal exactly:
// the plant without mismatch, fed the cue from the same rest pose, is the
// model that made the reference (sim's TestPlantWithoutMismatchIsTheModel),
// so the only error left is the nominal's interpolation at the same tick
// times, which is zero. A closed-loop run on the same plant must stay
// close too.
func TestSimOpenLoopPerfectPlantTracksTheReference(t *testing.T) {
	code, out, errOut := runCLI("sim", "-fast", "-open-loop", "-no-capture", "-duration-s", "1", demoCell, demoCue)
	if code != 0 {
		t.Fatalf("exit %d\n%s\n%s", code, out, errOut)
	}
	m := regexp.MustCompile(`RMS ([0-9.]+) mm`).FindStringSubmatch(out)
	if m == nil {
		t.Fatalf("no RMS in:\n%s", out)
	}
	if rms, _ := strconv.ParseFloat(m[1], 64); rms > 0.005 {
		t.Errorf("open loop on a perfect plant: RMS %v mm, want 0.00 (the plant is the reference's model)", rms)
	}
}
