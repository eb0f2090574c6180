package main

import (
	"bytes"
	"crypto/sha256"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"tautline/proto/capture"
	tautlinev1 "tautline/proto/tautline/v1"
)

const testCue = "time_s,left.j1\n0,0\n1,0.1\n" // invented

// writeTestCapture records an invented session of three ticks and its end.
func writeTestCapture(t *testing.T) (path string, size int64) {
	t.Helper()
	path = filepath.Join(t.TempDir(), "run.tlcap")
	w, err := capture.Create(path, capture.Settings{FlushInterval: -1})
	if err != nil {
		t.Fatal(err)
	}
	cue := []byte(testCue)
	sum := sha256.Sum256(cue)
	recs := []*tautlinev1.Record{{Kind: &tautlinev1.Record_SessionStart{SessionStart: &tautlinev1.SessionStart{
		SessionId: "s-42", CellName: "demo", CueName: "wave", StartUnixNs: 1_796_000_000_000_000_000, Recorder: "test",
		Files: []*tautlinev1.EmbeddedFile{{Role: tautlinev1.EmbeddedFileRole_EMBEDDED_FILE_ROLE_CUE, Name: "wave.csv", Content: cue, Sha256: sum[:]}},
	}}}}
	for i := range 3 {
		recs = append(recs,
			&tautlinev1.Record{SinceStartNs: int64(i) * 1e7, Kind: &tautlinev1.Record_Observation{Observation: &tautlinev1.Observation{TickSeq: uint64(i), CueTimeS: 0.5 + 0.01*float64(i)}}},
			&tautlinev1.Record{SinceStartNs: int64(i)*1e7 + 1e5, Kind: &tautlinev1.Record_Command{Command: &tautlinev1.Command{TickSeq: uint64(i)}}})
	}
	recs = append(recs,
		&tautlinev1.Record{SinceStartNs: 3e7, Kind: &tautlinev1.Record_Event{Event: &tautlinev1.Event{Kind: tautlinev1.EventKind_EVENT_KIND_STATE_CHANGE, Reason: "cue ended"}}},
		&tautlinev1.Record{SinceStartNs: 3e7, Kind: &tautlinev1.Record_SessionEnd{SessionEnd: &tautlinev1.SessionEnd{EndUnixNs: 1_796_000_002_500_000_000, Reason: "cue ended", Ticks: 3}}})
	for _, r := range recs {
		if err := w.Write(r); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	return path, w.Stats().Bytes
}

func runTautline(args ...string) (code int, stdout, stderr string) {
	var out, errb bytes.Buffer
	code = run(args, &out, &errb)
	return code, out.String(), errb.String()
}

func TestCaptureInfo(t *testing.T) {
	path, size := writeTestCapture(t)
	code, out, errs := runTautline("capture", "info", path)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	for _, want := range []string{
		"session   s-42 (part 1)",
		"cell      demo",
		"cue       wave",
		"started   " + time.Unix(1_796_000_000, 0).UTC().Format(time.RFC3339Nano),
		"duration  2.500 s (session end minus start, wall clock)",
		"cue time  0.500 s to 0.520 s over 3 observations",
		"records   9: session_start 1, observation 3, command 3, event 1, session_end 1",
		"cue wave.csv (" + strconv.Itoa(len(testCue)) + " bytes, sha256 ok)",
		"end       cue ended (3 ticks)",
		"damage    none",
	} {
		if !strings.Contains(out, want) {
			t.Errorf("info output lacks %q:\n%s", want, out)
		}
	}
	if !strings.Contains(out, "format version 1, "+strconv.FormatInt(size, 10)+" bytes") {
		t.Errorf("info output does not give the size %d:\n%s", size, out)
	}
}

func TestCaptureInfoAndRepairTornTail(t *testing.T) {
	path, size := writeTestCapture(t)
	if err := os.Truncate(path, size-3); err != nil {
		t.Fatal(err)
	}
	code, out, errs := runTautline("capture", "info", path)
	if code != 0 {
		t.Fatalf("exit %d on a torn tail: %s", code, errs)
	}
	for _, want := range []string{"damage    torn tail:", "bytes dropped", "capture repair " + path, "no session_end in this file", "session_end 0"} {
		if !strings.Contains(out, want) {
			t.Errorf("info on a torn capture lacks %q:\n%s", want, out)
		}
	}
	code, out, errs = runTautline("capture", "repair", path)
	if code != 0 || !strings.Contains(out, "repaired: 8 records") || !strings.Contains(out, "original kept as "+path+capture.DamagedSuffix) {
		t.Fatalf("repair exit %d:\n%s%s", code, out, errs)
	}
	code, out, _ = runTautline("capture", "info", path)
	if code != 0 || !strings.Contains(out, "damage    none") {
		t.Errorf("info after repair, exit %d:\n%s", code, out)
	}
	code, out, _ = runTautline("capture", "repair", path)
	if code != 0 || !strings.Contains(out, "nothing to do") {
		t.Errorf("second repair, exit %d:\n%s", code, out)
	}
}

func TestCaptureMiddleCorruption(t *testing.T) {
	path, _ := writeTestCapture(t)
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	data[len(data)-40] ^= 0x08 // inside an early-ending record, valid ones after
	if err := os.WriteFile(path, data, 0o644); err != nil {
		t.Fatal(err)
	}
	code, out, errs := runTautline("capture", "info", path)
	if code != 1 || !strings.Contains(out, "damage    corrupt record at byte offset") || !strings.Contains(errs, "corrupt record") {
		t.Errorf("info exit %d:\n%s%s", code, out, errs)
	}
	code, _, errs = runTautline("capture", "repair", path)
	if code != 1 || !strings.Contains(errs, "-cut-at-corruption") {
		t.Errorf("repair without consent: exit %d: %s", code, errs)
	}
	code, out, errs = runTautline("capture", "repair", "-cut-at-corruption", path)
	if code != 0 || !strings.Contains(out, "repaired") {
		t.Errorf("repair with -cut-at-corruption: exit %d:\n%s%s", code, out, errs)
	}
}

func TestCaptureUsage(t *testing.T) {
	for _, tc := range []struct {
		args []string
		code int
		want string
	}{
		{[]string{"capture"}, 2, "name an action"},
		{[]string{"capture", "replay"}, 2, "unknown action"},
		{[]string{"capture", "info"}, 2, "want one capture FILE"},
		{[]string{"capture", "info", "a", "b"}, 2, "want one capture FILE"},
		{[]string{"capture", "info", filepath.Join(t.TempDir(), "missing.tlcap")}, 1, "no such file"},
	} {
		code, _, errs := runTautline(tc.args...)
		if code != tc.code || !strings.Contains(errs, tc.want) {
			t.Errorf("%q: exit %d, stderr %q; want exit %d and %q", tc.args, code, errs, tc.code, tc.want)
		}
	}
	notCapture := filepath.Join(t.TempDir(), "cue.csv")
	if err := os.WriteFile(notCapture, []byte("time_s,a.j1\n0,0\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	if code, _, errs := runTautline("capture", "info", notCapture); code != 1 || !strings.Contains(errs, "not a tautline capture") {
		t.Errorf("info on a CSV: exit %d, %q", code, errs)
	}
}

func TestCaptureInfoOnParts(t *testing.T) {
	base := filepath.Join(t.TempDir(), "run.tlcap")
	w, err := capture.Create(base, capture.Settings{FlushInterval: -1, MaxFileBytes: 200})
	if err != nil {
		t.Fatal(err)
	}
	if err := w.Write(&tautlinev1.Record{Kind: &tautlinev1.Record_SessionStart{SessionStart: &tautlinev1.SessionStart{SessionId: "split"}}}); err != nil {
		t.Fatal(err)
	}
	for i := range 20 {
		obs := &tautlinev1.Observation{TickSeq: uint64(i), MeasuredJointPositions: []float64{1, 2, 3}}
		if err := w.Write(&tautlinev1.Record{Kind: &tautlinev1.Record_Observation{Observation: obs}}); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	n := len(w.Files())
	code, out, errs := runTautline("capture", "info", base)
	if code != 0 || n < 2 {
		t.Fatalf("exit %d with %d parts: %s", code, n, errs)
	}
	if got := strings.Count(out, "session   split (part "); got != n {
		t.Errorf("info printed %d parts, the writer made %d:\n%s", got, n, out)
	}
	if got := strings.Count(out, "continued in the next part"); got != n-1 {
		t.Errorf("%d parts say they continue, want %d", got, n-1)
	}
}
