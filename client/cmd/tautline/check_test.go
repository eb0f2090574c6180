package main

import (
	"bytes"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

const (
	demoCell = "../../../testdata/demo/cell.json"
	demoCue  = "../../../testdata/demo/cue.csv"
)

func runCLI(args ...string) (code int, stdout, stderr string) {
	var o, e bytes.Buffer
	code = run(args, &o, &e)
	return code, o.String(), e.String()
}

func TestCheckDemoCell(t *testing.T) {
	code, out, errOut := runCLI("check", demoCell)
	if code != 0 {
		t.Fatalf("exit %d, stderr %s", code, errOut)
	}
	for _, want := range []string{"left.j1", "right.j6", "total mass 1.470 kg", "rest pose", "nodes no marker sees", "ok: "} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q", want)
		}
	}
}

func TestCheckDemoCellAndCue(t *testing.T) {
	code, out, errOut := runCLI("check", demoCell, demoCue)
	if code != 0 {
		t.Fatalf("exit %d, stderr %s", code, errOut)
	}
	for _, want := range []string{"cue ", "12.000 s", "peak speed", "of limit", "planner authority", "weakest joint", "is valid for this cell"} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q", want)
		}
	}
}

func TestCheckBadFiles(t *testing.T) {
	dir := t.TempDir()
	for _, f := range []string{"arm6.urdf", "jellyfish.figure.json", "cell.json", "cue.csv"} {
		data, err := os.ReadFile(filepath.Join("../../../testdata/demo", f))
		if err != nil {
			t.Fatal(err)
		}
		if f == "cell.json" {
			data = bytes.Replace(data, []byte(`"node": "rim2"`), []byte(`"node": "rim42"`), 1)
		}
		if f == "cue.csv" {
			data = bytes.Replace(data, []byte("time_s,left.j1"), []byte("time_s,left.j9"), 1)
		}
		if err := os.WriteFile(filepath.Join(dir, f), data, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	code, _, errOut := runCLI("check", filepath.Join(dir, "cell.json"))
	if code != 1 || !strings.Contains(errOut, "cell.json:") || !strings.Contains(errOut, "strings[0].node") || !strings.Contains(errOut, "rim42") {
		t.Errorf("bad cell: exit %d, stderr %q", code, errOut)
	}
	code, _, errOut = runCLI("check", demoCell, filepath.Join(dir, "cue.csv"))
	if code != 1 || !strings.Contains(errOut, "cue.csv:") || !strings.Contains(errOut, "left.j9") {
		t.Errorf("bad cue: exit %d, stderr %q", code, errOut)
	}
	code, _, errOut = runCLI("check", filepath.Join(dir, "missing.json"))
	if code != 1 || !strings.Contains(errOut, "missing.json") {
		t.Errorf("missing file: exit %d, stderr %q", code, errOut)
	}
}

func TestCheckUsage(t *testing.T) {
	if code, _, errOut := runCLI("check"); code != 2 || !strings.Contains(errOut, "usage: tautline check") {
		t.Errorf("no args: exit %d, stderr %q", code, errOut)
	}
	if code, _, errOut := runCLI("check", "--help"); code != 0 || !strings.Contains(errOut, "rest pose") {
		t.Errorf("--help: exit %d, stderr %q", code, errOut)
	}
	if code, _, _ := runCLI("check", "--bogus", demoCell); code != 2 {
		t.Errorf("bad flag: exit %d, want 2", code)
	}
	if code, _, errOut := runCLI("nonsense"); code != 2 || !strings.Contains(errOut, "unknown subcommand") {
		t.Errorf("unknown subcommand: exit %d, stderr %q", code, errOut)
	}
	if code, out, _ := runCLI("--help"); code != 0 || !strings.Contains(out, "check") {
		t.Errorf("--help: exit %d, out %q", code, out)
	}
}
