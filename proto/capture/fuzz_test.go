package capture

import (
	"bytes"
	"errors"
	"testing"

	"google.golang.org/protobuf/proto"
)

// FuzzCaptureReader reads arbitrary bytes as a capture. Whatever the input,
// the reader must not panic, every record it returns must have its kind,
// and what it calls the valid prefix must read again as the same records
// with no damage. Seeds are in testdata/fuzz/FuzzCaptureReader (a clean
// capture, torn ones, a flipped bit, zero fill, a huge length, a bad
// header); `go test` runs them.
func FuzzCaptureReader(f *testing.F) {
	f.Fuzz(func(t *testing.T, data []byte) {
		recs, r, err := readAll(data)
		if r == nil {
			return // not a capture: refused at the header
		}
		for i, rec := range recs {
			if rec.GetKind() == nil {
				t.Fatalf("record %d has no kind", i)
			}
		}
		var corrupt *CorruptError
		switch {
		case errors.As(err, &corrupt):
			if corrupt.Offset != r.End() || corrupt.NextValidOffset <= corrupt.Offset || corrupt.NextValidOffset >= int64(len(data)) {
				t.Fatalf("corruption %v does not fit the valid prefix %d of %d bytes", corrupt, r.End(), len(data))
			}
		case err != nil:
			t.Fatalf("in-memory read failed: %v", err)
		case r.Damage() != nil:
			if d := r.Damage(); d.Offset != r.End() && !(d.Offset == 0 && len(recs) == 0) || d.Offset+d.BytesDropped != int64(len(data)) {
				t.Fatalf("damage %v does not span the valid prefix end %d to the end %d", d, r.End(), len(data))
			}
		case r.End() != int64(len(data)):
			t.Fatalf("clean end at %d of %d bytes", r.End(), len(data))
		}
		if len(recs) == 0 {
			return
		}
		again, r2, err := readAll(data[:r.End()])
		if err != nil || r2.Damage() != nil || len(again) != len(recs) {
			t.Fatalf("the valid prefix (%d bytes) reads as %d records, damage %v, err %v; want %d clean", r.End(), len(again), r2.Damage(), err, len(recs))
		}
		// Decode, re-frame, decode again: the same records.
		reframed := append([]byte(nil), header...)
		for _, rec := range again {
			if reframed, err = appendFrame(reframed, rec); err != nil {
				t.Fatal(err)
			}
		}
		back, r3, err := readAll(reframed)
		if err != nil || r3.Damage() != nil || len(back) != len(recs) {
			t.Fatalf("re-framed records read as %d, damage %v, err %v; want %d clean", len(back), r3.Damage(), err, len(recs))
		}
		det := proto.MarshalOptions{Deterministic: true}
		for i := range back {
			a, _ := det.Marshal(back[i])
			b, _ := det.Marshal(recs[i])
			if !bytes.Equal(a, b) {
				t.Fatalf("record %d changed when re-framed", i)
			}
		}
	})
}
