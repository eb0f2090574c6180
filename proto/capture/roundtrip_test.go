package capture

import (
	"errors"
	"io"
	"strings"
	"testing"

	"google.golang.org/protobuf/proto"

	tautlinev1 "tautline/proto/tautline/v1"
)

// everyKind is a session with every record kind and every event kind.
func everyKind() []*tautlinev1.Record {
	recs := []*tautlinev1.Record{startRecord()}
	for i := range 3 {
		obs, cmd := tickRecords(i)
		recs = append(recs, obs, cmd)
	}
	for k := tautlinev1.EventKind_EVENT_KIND_STATE_CHANGE; k <= tautlinev1.EventKind_EVENT_KIND_OPERATOR; k++ {
		recs = append(recs, &tautlinev1.Record{SinceStartNs: 40_000_000 + int64(k), Kind: &tautlinev1.Record_Event{Event: &tautlinev1.Event{
			Kind: k, FromState: tautlinev1.SessionState_SESSION_STATE_LIVE, ToState: tautlinev1.SessionState_SESSION_STATE_COAST,
			TickSeq: 2, CueTimeS: 0.02, Reason: "markers lost for 5 ticks (" + k.String() + ")",
		}}})
	}
	// A rejected tick: its command carries the error.
	_, bad := tickRecords(3)
	bad.GetCommand().Error = &tautlinev1.TickError{Code: tautlinev1.TickErrorCode_TICK_ERROR_CODE_NOT_FINITE,
		Field: "measured_joint_positions[4]", Message: "NaN; send finite joint positions"}
	recs = append(recs, bad, &tautlinev1.Record{SinceStartNs: 50_000_000, Kind: &tautlinev1.Record_SessionEnd{SessionEnd: &tautlinev1.SessionEnd{
		EndUnixNs: 1_796_000_000_050_000_000, Reason: "cue ended", Ticks: 4}}})
	return recs
}

func TestRoundTripEveryKind(t *testing.T) {
	want := everyKind()
	path := writeCapture(t, want)
	got, damage, err := ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if damage != nil {
		t.Fatalf("clean capture reads with damage: %v", damage)
	}
	if len(got) != len(want) {
		t.Fatalf("read %d records, wrote %d", len(got), len(want))
	}
	seen := map[string]bool{}
	for i := range want {
		w := want[i]
		if i == 0 { // the writer numbers the part
			w = proto.Clone(w).(*tautlinev1.Record)
			w.GetSessionStart().Part = 1
		}
		if !proto.Equal(got[i], w) {
			t.Errorf("record %d (%s) differs:\n got %v\nwant %v", i, KindName(w), got[i], w)
		}
		seen[KindName(got[i])] = true
	}
	for _, k := range Kinds {
		if !seen[k] {
			t.Errorf("no %s record read back", k)
		}
	}
	if want[0].GetSessionStart().GetPart() != 0 {
		t.Error("Write changed the caller's record")
	}
}

func TestReaderKeepsReturningEOF(t *testing.T) {
	data := mustRead(t, writeCapture(t, []*tautlinev1.Record{smallStart()}))
	r, err := NewReader(bytesAt(data), int64(len(data)))
	if err != nil {
		t.Fatal(err)
	}
	if _, err := r.Next(); err != nil {
		t.Fatal(err)
	}
	for range 3 {
		if rec, err := r.Next(); rec != nil || !errors.Is(err, io.EOF) {
			t.Fatalf("after the last record Next = %v, %v; want nil, io.EOF", rec, err)
		}
	}
}

func TestWriterRefuses(t *testing.T) {
	path := t.TempDir() + "/c.tlcap"
	w, err := Create(path, Settings{FlushInterval: -1})
	if err != nil {
		t.Fatal(err)
	}
	if err := w.Write(smallRecord(1)); err == nil || !strings.Contains(err.Error(), "first record must be a session_start") {
		t.Errorf("observation before session_start: err = %v", err)
	}
	if err := w.Write(smallStart()); err != nil {
		t.Fatal(err)
	}
	if err := w.Write(smallStart()); err == nil || !strings.Contains(err.Error(), "one session_start") {
		t.Errorf("second session_start: err = %v", err)
	}
	if err := w.Write(&tautlinev1.Record{SinceStartNs: 5}); err == nil || !strings.Contains(err.Error(), "no kind") {
		t.Errorf("record without kind: err = %v", err)
	}
	huge := &tautlinev1.Record{Kind: &tautlinev1.Record_Event{Event: &tautlinev1.Event{Reason: strings.Repeat("x", MaxRecordBytes)}}}
	if err := w.Write(huge); err == nil || !strings.Contains(err.Error(), "exceeds") {
		t.Errorf("record over MaxRecordBytes: err = %v", err)
	}
	// Refused records leave the recording going.
	if err := w.Write(smallRecord(2)); err != nil {
		t.Fatalf("write after refused records: %v", err)
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	if err := w.Write(smallRecord(3)); !errors.Is(err, ErrClosed) {
		t.Errorf("write after Close: err = %v, want ErrClosed", err)
	}
	got, damage, err := ReadFile(path)
	if err != nil || damage != nil || len(got) != 2 {
		t.Fatalf("ReadFile = %d records, %v, %v; want 2 records, no damage", len(got), damage, err)
	}
	if _, err := Create(path, Settings{}); err == nil {
		t.Error("Create replaced an existing capture")
	}
}

func TestReaderRefusesOtherFiles(t *testing.T) {
	for _, tc := range []struct{ data, want string }{
		{"hello, world\n", "not a tautline capture"},
		{"tautline.capture/2\n", "format version 2"},
		{"tautline.capture/x\n", "not a number"},
		{"tautline.capture/\n", "no format version"},
		{"tautline.capture/1234567890\n", "not a number"},
	} {
		_, err := NewReader(bytesAt(tc.data), int64(len(tc.data)))
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%q: err = %v, want one containing %q", tc.data, err, tc.want)
		}
	}
}
