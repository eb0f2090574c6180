package capture

import (
	"errors"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	tautlinev1 "tautline/proto/tautline/v1"
)

func TestRotationMakesSelfContainedParts(t *testing.T) {
	path := filepath.Join(t.TempDir(), "run.tlcap")
	w, err := Create(path, Settings{FlushInterval: -1, MaxFileBytes: 2000})
	if err != nil {
		t.Fatal(err)
	}
	const ticks = 40
	if err := w.Write(startRecord()); err != nil {
		t.Fatal(err)
	}
	for i := range ticks {
		obs, cmd := tickRecords(i)
		if err := w.Write(obs); err != nil {
			t.Fatal(err)
		}
		if err := w.Write(cmd); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	files := w.Files()
	if parts, err := Parts(path); err != nil || strings.Join(parts, " ") != strings.Join(files, " ") {
		t.Errorf("Parts(%s) = %v, %v; want %v", path, parts, err, files)
	}
	if len(files) < 3 {
		t.Fatalf("%d parts; want several at 2000 bytes each for %d ticks", len(files), ticks)
	}
	tick := 0
	for n, f := range files {
		if f != PartPath(path, n+1) {
			t.Errorf("part %d is %s, want %s", n+1, f, PartPath(path, n+1))
		}
		recs, damage, err := ReadFile(f)
		if err != nil || damage != nil {
			t.Fatalf("%s: %v, damage %v", f, err, damage)
		}
		if st := recs[0].GetSessionStart(); st == nil || st.GetPart() != uint32(n+1) || st.GetSessionId() != "s-0001" || len(st.GetFiles()) != 2 {
			t.Fatalf("%s opens with %v; want the session start, part %d", f, recs[0], n+1)
		}
		body := recs[1:]
		if last := n == len(files)-1; !last {
			ev := recs[len(recs)-1].GetEvent()
			if ev.GetKind() != tautlinev1.EventKind_EVENT_KIND_CONTINUED_IN_NEXT_PART || !strings.Contains(ev.GetReason(), filepath.Base(files[n+1])) {
				t.Fatalf("%s ends with %v; want a pointer to %s", f, recs[len(recs)-1], files[n+1])
			}
			body = recs[1 : len(recs)-1]
			// Soft bound: a part passes MaxFileBytes by at most the
			// continuation event.
			if st, _ := os.Stat(f); st.Size() > 2000+64 {
				t.Errorf("%s is %d bytes, bound 2000", f, st.Size())
			}
		}
		for _, rec := range body {
			if got := int(rec.GetObservation().GetTickSeq() + rec.GetCommand().GetTickSeq()); got != tick/2 {
				t.Fatalf("%s: record %d is tick %d, want %d", f, tick, got, tick/2)
			}
			tick++
		}
	}
	if tick != 2*ticks {
		t.Errorf("parts hold %d tick records, wrote %d", tick, 2*ticks)
	}
	if s := w.Stats(); s.Records != 2*ticks+1 || s.SyncedRecords != s.Records || s.Parts != len(files) {
		t.Errorf("stats %+v", s)
	}
}

// The flush clock is injectable: nothing reaches the file until the
// writer's goroutine receives a tick, and Close stops that goroutine.
func TestSyncTicksDriveFlushes(t *testing.T) {
	path := filepath.Join(t.TempDir(), "c.tlcap")
	ticks := make(chan time.Time)
	w, err := Create(path, Settings{SyncTicks: ticks})
	if err != nil {
		t.Fatal(err)
	}
	recs := []*tautlinev1.Record{smallStart(), smallRecord(0), smallRecord(1)}
	for _, r := range recs {
		if err := w.Write(r); err != nil {
			t.Fatal(err)
		}
	}
	if got, _, _ := ReadFile(path); len(got) != 0 {
		t.Fatalf("%d records on file before any flush tick", len(got))
	}
	ticks <- time.Time{}
	deadline := time.Now().Add(10 * time.Second)
	for w.Stats().Syncs == 0 {
		if time.Now().After(deadline) {
			t.Fatal("no sync 10 s after a flush tick")
		}
		time.Sleep(time.Millisecond)
	}
	if s := w.Stats(); s.SyncedRecords != 3 {
		t.Errorf("SyncedRecords = %d after the tick, want 3", s.SyncedRecords)
	}
	if got, _, err := ReadFile(path); len(got) != 3 || err != nil {
		t.Fatalf("%d records on file after the flush tick (%v), want 3", len(got), err)
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	select {
	case <-w.done:
	default:
		t.Fatal("Close returned with the sync goroutine running")
	}
}

// failingFile fails its Sync from the failAt-th call on, and counts calls.
type failingFile struct {
	*os.File
	mu            sync.Mutex
	syncs, failAt int
}

var errDiskGone = errors.New("injected: input/output error")

func (f *failingFile) Sync() error {
	f.mu.Lock()
	defer f.mu.Unlock()
	f.syncs++
	if f.syncs >= f.failAt {
		return errDiskGone
	}
	return f.File.Sync()
}

func TestFsyncErrorIsFatalAndNotRetried(t *testing.T) {
	var ff *failingFile
	defer func(orig func(string) (partFile, error)) { createPart = orig }(createPart)
	createPart = func(name string) (partFile, error) {
		f, err := os.OpenFile(name, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o644)
		if err != nil {
			return nil, err
		}
		ff = &failingFile{File: f, failAt: 2} // the header's fsync succeeds
		return ff, nil
	}
	w, err := Create(filepath.Join(t.TempDir(), "c.tlcap"), Settings{FlushInterval: -1})
	if err != nil {
		t.Fatal(err)
	}
	if err := w.Write(smallStart()); err != nil {
		t.Fatal(err)
	}
	err = w.Sync()
	if !errors.Is(err, errDiskGone) || !strings.Contains(err.Error(), "recording stopped") {
		t.Fatalf("Sync = %v; want the fsync error, saying the recording stopped", err)
	}
	for name, call := range map[string]func() error{
		"Write": func() error { return w.Write(smallRecord(1)) },
		"Sync":  w.Sync,
		"Err":   w.Err,
		"Close": w.Close,
	} {
		if got := call(); !errors.Is(got, errDiskGone) {
			t.Errorf("%s after a failed fsync = %v; want the same error", name, got)
		}
	}
	if ff.syncs != 2 {
		t.Errorf("fsync called %d times; want 2 (header, then the failure, never retried)", ff.syncs)
	}
}

// Writes from several goroutines, the writer's own 1 ms flush timer, extra
// Sync calls and part switches all at once: nothing lost, nothing torn,
// each goroutine's records in its order. Run it with -race.
func TestConcurrentWriteSyncAndSplit(t *testing.T) {
	path := filepath.Join(t.TempDir(), "c.tlcap")
	w, err := Create(path, Settings{FlushInterval: time.Millisecond, MaxFileBytes: 3000})
	if err != nil {
		t.Fatal(err)
	}
	if err := w.Write(smallStart()); err != nil {
		t.Fatal(err)
	}
	const writers, each = 4, 200
	var wg sync.WaitGroup
	for g := range writers {
		wg.Go(func() {
			for i := range each {
				if err := w.Write(smallRecord(g*each + i)); err != nil {
					t.Error(err)
					return
				}
				if i%50 == 0 {
					if err := w.Sync(); err != nil {
						t.Error(err)
						return
					}
				}
			}
		})
	}
	wg.Wait()
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	next := make([]int, writers)
	for _, f := range w.Files() {
		recs, damage, err := ReadFile(f)
		if err != nil || damage != nil {
			t.Fatalf("%s: %v, damage %v", f, err, damage)
		}
		for _, rec := range recs {
			if obs := rec.GetObservation(); obs != nil {
				g, i := int(obs.GetTickSeq())/each, int(obs.GetTickSeq())%each
				if i != next[g] {
					t.Fatalf("%s: writer %d's record %d where %d was due", f, g, i, next[g])
				}
				next[g]++
			}
		}
	}
	for g, n := range next {
		if n != each {
			t.Errorf("writer %d: %d records read back, wrote %d", g, n, each)
		}
	}
}

// A session end is on disk when Write returns, with no timer and no Sync.
func TestSessionEndIsSynced(t *testing.T) {
	path := filepath.Join(t.TempDir(), "c.tlcap")
	w, err := Create(path, Settings{FlushInterval: -1})
	if err != nil {
		t.Fatal(err)
	}
	defer w.Close()
	end := &tautlinev1.Record{Kind: &tautlinev1.Record_SessionEnd{SessionEnd: &tautlinev1.SessionEnd{Reason: "cue ended"}}}
	for _, r := range []*tautlinev1.Record{smallStart(), smallRecord(0), end} {
		if err := w.Write(r); err != nil {
			t.Fatal(err)
		}
	}
	if s := w.Stats(); s.SyncedRecords != 3 || s.Syncs != 1 {
		t.Errorf("stats after the session end: %+v; want 3 records synced once", s)
	}
	recs, damage, err := ReadFile(path)
	if len(recs) != 3 || damage != nil || err != nil {
		t.Fatalf("file holds %d records (%v, %v) before Close; want 3", len(recs), damage, err)
	}
}
