package capture

import (
	"errors"
	"fmt"
	"math/rand/v2"
	"strings"
	"testing"

	tautlinev1 "tautline/proto/tautline/v1"
)

// smallCapture is a session start and n short observations.
func smallCapture(t testing.TB, n int) []byte {
	recs := []*tautlinev1.Record{smallStart()}
	for i := range n {
		recs = append(recs, smallRecord(i))
	}
	return mustRead(t, writeCapture(t, recs))
}

// recordsEnding counts the frames whose end is at or before cut, given
// the frame offsets (file size last).
func recordsEnding(offs []int64, cut int64) int {
	k := 0
	for k+1 < len(offs) && offs[k+1] <= cut {
		k++
	}
	return k
}

func TestTruncationAtEveryOffset(t *testing.T) {
	data := smallCapture(t, 8)
	offs := frameOffsets(t, data) // offs[k] = start of record k; last = size
	for cut := 0; cut <= len(data); cut++ {
		recs, r, err := readAll(data[:cut])
		if err != nil {
			t.Fatalf("cut at %d: %v", cut, err)
		}
		want := 0
		if cut >= HeaderSize {
			want = recordsEnding(offs, int64(cut))
		}
		if len(recs) != want {
			t.Fatalf("cut at %d: read %d records, want the %d whole ones before the cut", cut, len(recs), want)
		}
		for i, rec := range recs {
			if i > 0 && rec.GetObservation().GetTickSeq() != uint64(i-1) {
				t.Fatalf("cut at %d: record %d is tick %d", cut, i, rec.GetObservation().GetTickSeq())
			}
		}
		atBoundary := cut == HeaderSize || (cut > HeaderSize && offs[want] == int64(cut))
		d := r.Damage()
		switch {
		case atBoundary && d != nil:
			t.Fatalf("cut at record boundary %d reads with damage %v", cut, d)
		case !atBoundary && d == nil:
			t.Fatalf("cut at %d inside a record or the header reads without damage", cut)
		case d != nil && (d.Offset+d.BytesDropped != int64(cut) || d.Offset != r.End()):
			t.Fatalf("cut at %d: damage %v does not span the end of the valid prefix (%d) to the cut", cut, d, r.End())
		}
	}
}

// TestSingleBitFlips flips one random bit of a small capture 10⁵ times
// (fixed seed). CRC32C detects every single-bit error in a message this
// short (any CRC with more than one term does; Koopman, "32-bit cyclic
// redundancy codes for Internet applications", DSN 2002), so each flip must
// be caught exactly at the record it hit: the reader returns the records
// before it, then reports a torn tail (last record) or a middle corruption
// naming the record's offset and the next record's.
func TestSingleBitFlips(t *testing.T) {
	data := smallCapture(t, 12)
	offs := frameOffsets(t, data)
	rng := rand.New(rand.NewPCG(6, 1))
	const flips = 100_000
	var headerErrs, tails, middles int
	for range flips {
		bit := rng.IntN(len(data) * 8)
		pos := bit / 8
		data[pos] ^= 1 << (bit % 8)
		recs, r, err := readAll(data)
		data[pos] ^= 1 << (bit % 8)
		if pos < HeaderSize {
			if r != nil {
				t.Fatalf("flip of header bit %d: opened without error", bit)
			}
			headerErrs++
			continue
		}
		k := recordsEnding(offs, int64(pos)) // the record holding the flipped byte
		if len(recs) != k {
			t.Fatalf("flip of bit %d (record %d): read %d records (err %v), want the %d before it", bit, k, len(recs), err, k)
		}
		var corrupt *CorruptError
		switch {
		case k == len(offs)-2: // the last record: a corrupt tail
			if err != nil || r.Damage() == nil || r.Damage().Offset != offs[k] {
				t.Fatalf("flip of bit %d in the last record: err %v, damage %v; want a tail dropped from %d", bit, err, r.Damage(), offs[k])
			}
			tails++
		case errors.As(err, &corrupt):
			if corrupt.Offset != offs[k] || corrupt.NextValidOffset != offs[k+1] {
				t.Fatalf("flip of bit %d: %v; want the record at %d, next at %d", bit, err, offs[k], offs[k+1])
			}
			middles++
		default:
			t.Fatalf("flip of bit %d in record %d of %d: err %v, damage %v; want a CorruptError", bit, k, len(offs)-1, err, r.Damage())
		}
	}
	t.Logf("%d flips over %d bytes: %d in the header, %d corrupt tails, %d middle corruptions", flips, len(data), headerErrs, tails, middles)
}

func TestMiddleCorruptionNamesOffset(t *testing.T) {
	data := smallCapture(t, 5)
	offs := frameOffsets(t, data)
	data[offs[3]+3] ^= 0x40 // inside record 3's body
	recs, _, err := readAll(data)
	if len(recs) != 3 {
		t.Errorf("read %d records before the damage, want 3", len(recs))
	}
	want := fmt.Sprintf("corrupt record at byte offset %d", offs[3])
	if err == nil || !strings.Contains(err.Error(), want) || !strings.Contains(err.Error(), "checksum mismatch") {
		t.Errorf("err = %v, want one saying %q and why", err, want)
	}
}

// A crashed file system may leave zeroed blocks at the end: they are
// damage, never records (a zero length is below the smallest record).
func TestZeroedTailIsDamage(t *testing.T) {
	data := smallCapture(t, 3)
	offs := frameOffsets(t, data)
	zeroed := append(append([]byte(nil), data...), make([]byte, 4096)...)
	recs, r, err := readAll(zeroed)
	if err != nil || len(recs) != len(offs)-1 {
		t.Fatalf("read %d records, err %v; want %d and no error", len(recs), err, len(offs)-1)
	}
	if d := r.Damage(); d == nil || d.Offset != int64(len(data)) || d.BytesDropped != 4096 {
		t.Fatalf("damage %v; want 4096 bytes dropped from %d", d, len(data))
	}
}

// A length field is checked against the bytes that remain before any
// allocation: a huge claimed length in a short file is damage.
func TestHugeLengthIsCheckedFirst(t *testing.T) {
	data := append(smallCapture(t, 1), 0xff, 0xff, 0xff, 0xff, 0x0f, 0x12, 0, 0, 0, 0)
	recs, r, err := readAll(data)
	if err != nil || len(recs) != 2 || r.Damage() == nil || !strings.Contains(r.Damage().Reason, "above the largest record") {
		t.Fatalf("records %d, err %v, damage %v", len(recs), err, r.Damage())
	}
	allocs := testing.AllocsPerRun(10, func() { readAll(data) })
	if clean := testing.AllocsPerRun(10, func() { readAll(data[:len(data)-10]) }); allocs > clean+12 {
		t.Errorf("a bad length costs %v allocations over a clean read's %v", allocs, clean)
	}
}

// Garbage longer than the scan's read chunk, with whole records after it:
// the reader must find the first of them (across chunk refills) and report
// a middle corruption from the garbage's start.
func TestLongGarbageBeforeValidRecords(t *testing.T) {
	data := smallCapture(t, 6)
	offs := frameOffsets(t, data)
	garbage := make([]byte, scanChunkBytes+12345)
	rng := rand.New(rand.NewPCG(6, 3))
	for i := range garbage {
		garbage[i] = byte(rng.Uint32())
	}
	var spliced []byte
	spliced = append(spliced, data[:offs[3]]...)
	spliced = append(spliced, garbage...)
	spliced = append(spliced, data[offs[3]:]...)
	recs, _, err := readAll(spliced)
	var corrupt *CorruptError
	if !errors.As(err, &corrupt) || len(recs) != 3 {
		t.Fatalf("read %d records, err %v; want 3 and a CorruptError", len(recs), err)
	}
	if want := offs[3] + int64(len(garbage)); corrupt.Offset != offs[3] || corrupt.NextValidOffset != want {
		t.Errorf("corruption at %d, next valid at %d; want %d and %d", corrupt.Offset, corrupt.NextValidOffset, offs[3], want)
	}
	// The same garbage as a tail is a torn tail.
	recs, r, err := readAll(spliced[:offs[3]+int64(len(garbage))])
	if err != nil || len(recs) != 3 || r.Damage() == nil || r.Damage().BytesDropped != int64(len(garbage)) {
		t.Errorf("garbage tail: %d records, err %v, damage %v", len(recs), err, r.Damage())
	}
}
