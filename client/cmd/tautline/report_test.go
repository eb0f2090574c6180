package main

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// report over the shortened demo's two captures: both runs on one
// tracking plot, a joints plot per run, the latency histogram, and a
// summary whose figures agree with the captures.
func TestReportOfTheDemoCaptures(t *testing.T) {
	demoDir := runShortDemo(t)
	out := t.TempDir()
	// In the order: the captures, then --out.
	code, stdout, errOut := runCLI("report",
		filepath.Join(demoDir, "open-loop.tlcap"), filepath.Join(demoDir, "closed-loop.tlcap"), "--out", out)
	if code != 0 {
		t.Fatalf("exit %d\n%s\n%s", code, stdout, errOut)
	}
	for _, f := range []string{"tracking_error", "joints-open-loop", "joints-closed-loop", "latency"} {
		for _, ext := range []string{".png", ".svg"} {
			if st, err := os.Stat(filepath.Join(out, f+ext)); err != nil || st.Size() < 1000 {
				t.Errorf("%s%s missing or tiny (%v)", f, ext, err)
			}
		}
	}
	svg, _ := os.ReadFile(filepath.Join(out, "tracking_error.svg"))
	for _, label := range []string{"open-loop", "closed-loop"} {
		if !strings.Contains(string(svg), label) {
			t.Errorf("tracking_error.svg has no legend entry %q", label)
		}
	}
	var sum reportSummary
	data, err := os.ReadFile(filepath.Join(out, "summary.json"))
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(data, &sum); err != nil {
		t.Fatal(err)
	}
	if len(sum.Runs) != 2 || sum.Runs[0].Label != "open-loop" || sum.Runs[1].Label != "closed-loop" {
		t.Fatalf("runs %+v", sum.Runs)
	}
	for _, r := range sum.Runs {
		// 3 standby ticks and 600 live ones, every one answered.
		if r.Ticks != 603 || r.LiveTicks != 600 {
			t.Errorf("%s: %d ticks, %d live; want 603 and 600", r.Label, r.Ticks, r.LiveTicks)
		}
		if r.BoundViolations != 0 {
			t.Errorf("%s: %d violations", r.Label, r.BoundViolations)
		}
		// The observed error includes 1 mm of tracker noise per
		// coordinate, so it cannot be below about √3 mm; it is a figure
		// error of centimetres under the standard profile.
		if r.ObservedRMSErrorM < 1.7e-3 || r.ObservedRMSErrorM > 0.5 {
			t.Errorf("%s: observed RMS error %v m out of any plausible range", r.Label, r.ObservedRMSErrorM)
		}
	}
	if sum.ObservedImprovementRatio == nil {
		t.Fatal("no observed improvement ratio for an open- and a closed-loop capture")
	}
	if got := *sum.ObservedImprovementRatio; got != sum.Runs[1].ObservedRMSErrorM/sum.Runs[0].ObservedRMSErrorM {
		t.Errorf("ratio %v is not closed ÷ open", got)
	}
}
