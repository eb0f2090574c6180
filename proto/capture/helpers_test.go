package capture

import (
	"crypto/sha256"
	"errors"
	"io"
	"os"
	"path/filepath"
	"testing"

	tautlinev1 "tautline/proto/tautline/v1"
)

// The demo tick below is invented: two 6-axis arms (12 joints), 10
// markers, a 5-tick preview and a 100 Hz tick. It stands for what the
// server records per tick.
const (
	demoJoints  = 12
	demoMarkers = 10
	demoPreview = 5
	demoPeriodS = 0.01
)

// embedded checks EmbedFile against crypto/sha256 and returns its entry.
func embedded(role tautlinev1.EmbeddedFileRole, name, content string) *tautlinev1.EmbeddedFile {
	f := EmbedFile(role, name, []byte(content))
	if sum := sha256.Sum256([]byte(content)); string(f.GetSha256()) != string(sum[:]) || f.GetName() != name || f.GetRole() != role {
		panic("EmbedFile: wrong entry for " + name)
	}
	return f
}

// startRecord is a SessionStart with small invented embedded files.
func startRecord() *tautlinev1.Record {
	joints := make([]string, demoJoints)
	for i := range joints {
		joints[i] = []string{"left", "right"}[i/6] + ".j" + string(rune('1'+i%6))
	}
	return &tautlinev1.Record{Kind: &tautlinev1.Record_SessionStart{SessionStart: &tautlinev1.SessionStart{
		SessionId:   "s-0001",
		CellName:    "demo",
		CueName:     "wave",
		StartUnixNs: 1_796_000_000_000_000_000,
		Files: []*tautlinev1.EmbeddedFile{
			embedded(tautlinev1.EmbeddedFileRole_EMBEDDED_FILE_ROLE_CELL, "demo.cell.json", `{"format": "tautline.cell/1", "note": "invented test data"}`),
			embedded(tautlinev1.EmbeddedFileRole_EMBEDDED_FILE_ROLE_CUE, "wave.csv", "time_s,left.j1\n0,0\n1,0.1\n"),
		},
		JointNames:  joints,
		TickPeriodS: demoPeriodS,
		Recorder:    "capture test",
	}}}
}

// tickRecords is tick i's observation and command, with values that vary
// with i so records differ.
func tickRecords(i int) (obs, cmd *tautlinev1.Record) {
	ids := make([]string, demoMarkers)
	for m := range ids {
		ids[m] = "m" + string(rune('a'+m))
	}
	return tickRecordsFor(i, ids)
}

// tickRecordsFor is tickRecords with the given marker ids.
func tickRecordsFor(i int, markerIDs []string) (obs, cmd *tautlinev1.Record) {
	t := float64(i) * demoPeriodS
	o := &tautlinev1.Observation{TickSeq: uint64(i), CueTimeS: t, CaptureTimeS: t - 0.02,
		MeasuredJointPositions: make([]float64, demoJoints)}
	for j := range o.MeasuredJointPositions {
		o.MeasuredJointPositions[j] = 0.1*float64(j) + 1e-3*float64(i)
	}
	for m, id := range markerIDs {
		o.Markers = append(o.Markers, &tautlinev1.MarkerSighting{MarkerId: id,
			XM: 0.5 + 0.01*float64(m), YM: -0.2 + 1e-4*float64(i), ZM: 1.1 - 0.03*float64(m)})
	}
	targets := func(k int) *tautlinev1.JointTargets {
		jt := &tautlinev1.JointTargets{CueTimeS: t + float64(k)*demoPeriodS, Positions: make([]float64, demoJoints)}
		for j := range jt.Positions {
			jt.Positions[j] = 0.1*float64(j) + 1e-3*float64(i+k)
		}
		return jt
	}
	c := &tautlinev1.Command{TickSeq: uint64(i), Next: targets(1), State: tautlinev1.SessionState_SESSION_STATE_LIVE, SolveTimeUs: 700}
	for k := range demoPreview {
		c.Preview = append(c.Preview, targets(k+2))
	}
	if i%7 == 3 {
		c.BoundsActed = []*tautlinev1.BoundAction{{JointIndex: 4, Kind: tautlinev1.BoundKind_BOUND_KIND_VELOCITY, Adjustment: -2e-3}}
	}
	ns := int64(i) * 10_000_000
	return &tautlinev1.Record{SinceStartNs: ns, Kind: &tautlinev1.Record_Observation{Observation: o}},
		&tautlinev1.Record{SinceStartNs: ns + 800_000, Kind: &tautlinev1.Record_Command{Command: c}}
}

// smallRecord is a short observation, for captures whose every byte a test
// visits.
func smallRecord(i int) *tautlinev1.Record {
	return &tautlinev1.Record{SinceStartNs: int64(i) * 1000, Kind: &tautlinev1.Record_Observation{Observation: &tautlinev1.Observation{
		TickSeq: uint64(i), CueTimeS: float64(i) * demoPeriodS, MeasuredJointPositions: []float64{float64(i), -1},
	}}}
}

// smallStart is a SessionStart without files, for small captures.
func smallStart() *tautlinev1.Record {
	return &tautlinev1.Record{Kind: &tautlinev1.Record_SessionStart{SessionStart: &tautlinev1.SessionStart{
		SessionId: "small", CellName: "demo", CueName: "wave"}}}
}

// writeCapture writes recs through a Writer (caller syncs only) and returns
// the file's path.
func writeCapture(t testing.TB, recs []*tautlinev1.Record) string {
	t.Helper()
	path := filepath.Join(t.TempDir(), "c.tlcap")
	w, err := Create(path, Settings{FlushInterval: -1})
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range recs {
		if err := w.Write(r); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	return path
}

// frameOffsets reads a clean capture and returns each record's frame
// offset, with the file's size appended.
func frameOffsets(t testing.TB, data []byte) []int64 {
	t.Helper()
	r, err := NewReader(bytesAt(data), int64(len(data)))
	if err != nil {
		t.Fatal(err)
	}
	var offs []int64
	for {
		_, err := r.Next()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		offs = append(offs, r.Offset())
	}
	if r.Damage() != nil {
		t.Fatalf("clean capture reads with damage: %v", r.Damage())
	}
	return append(offs, int64(len(data)))
}

type bytesAt []byte

func (b bytesAt) ReadAt(p []byte, off int64) (int, error) {
	if off >= int64(len(b)) {
		return 0, io.EOF
	}
	n := copy(p, b[off:])
	if n < len(p) {
		return n, io.EOF
	}
	return n, nil
}

// readAll reads every record of data, returning the terminal error (nil
// for a clean or torn end).
func readAll(data []byte) ([]*tautlinev1.Record, *Reader, error) {
	r, err := NewReader(bytesAt(data), int64(len(data)))
	if err != nil {
		return nil, nil, err
	}
	var recs []*tautlinev1.Record
	for {
		rec, err := r.Next()
		if errors.Is(err, io.EOF) {
			return recs, r, nil
		}
		if err != nil {
			return recs, r, err
		}
		recs = append(recs, rec)
	}
}

func mustRead(t testing.TB, path string) []byte {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	return b
}
