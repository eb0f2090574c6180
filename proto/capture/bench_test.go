package capture

import (
	"encoding/json"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"

	"google.golang.org/protobuf/proto"

	tautlinev1 "tautline/proto/tautline/v1"
)

// demoMarkerIDs reads the marker ids of the demo cell.
func demoMarkerIDs(b *testing.B) []string {
	data, err := os.ReadFile("../../testdata/demo/cell.json")
	if err != nil {
		b.Fatal(err)
	}
	var cell struct {
		Markers []struct{ ID string }
	}
	if err := json.Unmarshal(data, &cell); err != nil || len(cell.Markers) == 0 {
		b.Fatalf("demo cell markers: %v", err)
	}
	ids := make([]string, len(cell.Markers))
	for i, m := range cell.Markers {
		ids[i] = m.ID
	}
	return ids
}

// BenchmarkWriteTick records one demo-cell tick (an observation of 12
// joints and every marker of testdata/demo/cell.json, a command with next
// targets and a 5-tick preview; values invented) per iteration through a Writer with the default settings: 100 ms fsync
// interval on its own goroutine, 64 KiB buffer. It reports records/s and
// bytes/tick (framing included).
func BenchmarkWriteTick(b *testing.B) {
	w, err := Create(filepath.Join(b.TempDir(), "bench.tlcap"), Settings{})
	if err != nil {
		b.Fatal(err)
	}
	if err := w.Write(startRecord()); err != nil {
		b.Fatal(err)
	}
	ids := demoMarkerIDs(b)
	const ticks = 1000 // distinct ticks, reused round robin
	var obs, cmd [ticks]*tautlinev1.Record
	for i := range ticks {
		obs[i], cmd[i] = tickRecordsFor(i, ids)
	}
	before := w.Stats().Bytes
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if err := w.Write(obs[i%ticks]); err != nil {
			b.Fatal(err)
		}
		if err := w.Write(cmd[i%ticks]); err != nil {
			b.Fatal(err)
		}
	}
	b.StopTimer()
	s := w.Stats()
	if err := w.Close(); err != nil {
		b.Fatal(err)
	}
	b.ReportMetric(float64(2*b.N)/b.Elapsed().Seconds(), "records/s")
	b.ReportMetric(float64(s.Bytes-before)/float64(b.N), "bytes/tick")
	b.ReportMetric(float64(proto.Size(obs[0])), "observation-bytes")
	b.ReportMetric(float64(proto.Size(cmd[0])), "command-bytes")
}

// BenchmarkReadTick reads back the ticks BenchmarkWriteTick writes.
func BenchmarkReadTick(b *testing.B) {
	recs := []*tautlinev1.Record{startRecord()}
	for i := range 1000 {
		obs, cmd := tickRecords(i)
		recs = append(recs, obs, cmd)
	}
	data := mustRead(b, writeCapture(b, recs))
	b.ReportAllocs()
	b.SetBytes(int64(len(data)) / 1000)
	b.ResetTimer()
	for i := 0; i < b.N; i += 1000 {
		got, r, err := readAll(data)
		if err != nil || r.Damage() != nil || len(got) != len(recs) {
			b.Fatalf("%d records, %v, %v", len(got), r.Damage(), err)
		}
	}
}

// BenchmarkGarbageTail reads a small capture followed by 1 MiB of random
// bytes: the cost of deciding that a long damaged stretch hides no valid
// record (the scan's worst case short of MaxRecordBytes).
func BenchmarkGarbageTail(b *testing.B) {
	data := smallCapture(b, 4)
	garbage := make([]byte, 1<<20)
	rng := rand.New(rand.NewPCG(6, 4))
	for i := range garbage {
		garbage[i] = byte(rng.Uint32())
	}
	data = append(data, garbage...)
	b.SetBytes(int64(len(garbage)))
	b.ReportAllocs()
	for b.Loop() {
		recs, r, err := readAll(data)
		if err != nil || len(recs) != 5 || r.Damage() == nil {
			b.Fatalf("%d records, %v, %v", len(recs), r.Damage(), err)
		}
	}
}
