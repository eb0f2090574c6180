package capture

import (
	"bytes"
	"os"
	"path/filepath"
	"strings"
	"testing"

	tautlinev1 "tautline/proto/tautline/v1"
)

func writeFile(t *testing.T, data []byte) string {
	t.Helper()
	path := filepath.Join(t.TempDir(), "c.tlcap")
	if err := os.WriteFile(path, data, 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

func TestRepairTornTail(t *testing.T) {
	data := smallCapture(t, 6)
	offs := frameOffsets(t, data)
	torn := data[:offs[5]+4]
	path := writeFile(t, torn)
	rep, err := Repair(path, RepairSettings{})
	if err != nil {
		t.Fatal(err)
	}
	if rep.KeptAs != path+DamagedSuffix || rep.Records != 5 || rep.BytesKept != offs[5] || rep.Damage == nil || rep.Damage.BytesDropped != 4 {
		t.Fatalf("report %+v, damage %v; want 5 records, %d bytes kept, 4 dropped", rep, rep.Damage, offs[5])
	}
	if kept := mustRead(t, rep.KeptAs); !bytes.Equal(kept, torn) {
		t.Error("the original was not kept byte for byte")
	}
	if got := mustRead(t, path); !bytes.Equal(got, data[:offs[5]]) {
		t.Error("the repaired file is not the valid prefix")
	}
	// Repairing again finds nothing to do.
	rep, err = Repair(path, RepairSettings{})
	if err != nil || rep.Damage != nil || rep.KeptAs != "" || rep.Records != 5 {
		t.Fatalf("second repair: %+v, %v; want nothing done", rep, err)
	}
	// A new tear while a .damaged exists is refused rather than overwrite it.
	if err := os.WriteFile(path, torn, 0o644); err != nil {
		t.Fatal(err)
	}
	if _, err := Repair(path, RepairSettings{}); err == nil || !strings.Contains(err.Error(), "already exists") {
		t.Errorf("repair over an existing .damaged: err = %v", err)
	}
}

func TestRepairTornHeader(t *testing.T) {
	path := writeFile(t, []byte("tautline.capt"))
	rep, err := Repair(path, RepairSettings{})
	if err != nil {
		t.Fatal(err)
	}
	if rep.Records != 0 || !bytes.Equal(mustRead(t, path), header) {
		t.Fatalf("report %+v; want a header-only capture", rep)
	}
	if recs, damage, err := ReadFile(path); len(recs) != 0 || damage != nil || err != nil {
		t.Fatalf("repaired capture reads as %d records, %v, %v", len(recs), damage, err)
	}
}

func TestRepairMiddleCorruptionNeedsConsent(t *testing.T) {
	data := smallCapture(t, 6)
	offs := frameOffsets(t, data)
	data[offs[2]+3] ^= 1
	path := writeFile(t, data)
	if _, err := Repair(path, RepairSettings{}); err == nil || !strings.Contains(err.Error(), "would drop those records") {
		t.Fatalf("repair of a middle corruption: err = %v; want a refusal", err)
	}
	if !bytes.Equal(mustRead(t, path), data) {
		t.Fatal("a refused repair changed the file")
	}
	rep, err := Repair(path, RepairSettings{CutAtCorruption: true})
	if err != nil {
		t.Fatal(err)
	}
	if rep.Records != 2 || !strings.Contains(rep.Damage.Reason, "were dropped too") {
		t.Fatalf("report %+v, damage %v", rep, rep.Damage)
	}
	recs, damage, err := ReadFile(path)
	if len(recs) != 2 || damage != nil || err != nil {
		t.Fatalf("cut capture reads as %d records, %v, %v; want 2 clean", len(recs), damage, err)
	}
}

func TestSummarize(t *testing.T) {
	recs := everyKind()
	data := mustRead(t, writeCapture(t, recs))
	// Tear the session end off: the summary reports the damage and no end.
	offs := frameOffsets(t, data)
	path := writeFile(t, data[:offs[len(offs)-2]+2])
	s, err := Summarize(path)
	if err != nil {
		t.Fatal(err)
	}
	if s.Start.GetSessionId() != "s-0001" || s.Start.GetCellName() != "demo" || s.Start.GetCueName() != "wave" {
		t.Errorf("start %v", s.Start)
	}
	want := map[string]int{"session_start": 1, "observation": 3, "command": 4, "event": 6}
	for _, k := range Kinds {
		if s.Counts[k] != want[k] {
			t.Errorf("%s: %d records, want %d", k, s.Counts[k], want[k])
		}
	}
	if s.End != nil || s.Damage == nil || s.Damage.BytesDropped != 2 {
		t.Errorf("end %v, damage %v; want no end and 2 bytes dropped", s.End, s.Damage)
	}
	if s.FirstCueTimeS != 0 || s.LastCueTimeS != 2*demoPeriodS {
		t.Errorf("cue time %g..%g, want 0..%g", s.FirstCueTimeS, s.LastCueTimeS, 2*demoPeriodS)
	}
	if len(s.Files) != 2 || !s.Files[0].DigestOK || !s.Files[1].DigestOK {
		t.Errorf("file checks %+v", s.Files)
	}
	// A wrong digest is reported.
	bad := startRecord()
	bad.GetSessionStart().Files[1].Sha256[0] ^= 1
	s, err = Summarize(writeCapture(t, []*tautlinev1.Record{bad}))
	if err != nil || s.Files[1].DigestOK || !s.Files[0].DigestOK {
		t.Errorf("wrong digest: %+v, %v", s.Files, err)
	}
}
