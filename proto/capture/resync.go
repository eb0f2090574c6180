package capture

import (
	"encoding/binary"
	"fmt"
	"io"
)

// scanChunkBytes is how much of the file findFrame reads at a time.
const scanChunkBytes = 256 << 10

// frameReach bounds how far past a damaged frame's start the next frame can
// begin: the damaged frame was at most a maximal length field, a maximal
// record and a checksum long before the damage.
const frameReach = binary.MaxVarintLen64 + MaxRecordBytes + crcBytes

// findFrame looks for a valid frame starting in [from, from-1+frameReach]:
// a length field in range, a first byte that can start a Record, a
// matching checksum, and a record that decodes with its kind set. It tells
// damage with valid records after it (corruption in the middle) from a torn
// or corrupt tail.
//
// The first frame after a damaged one starts within frameReach of it, so a
// middle corruption is always found when the frame right after the damage
// is intact. Cost: one pass over the window, plus a checksum for each
// candidate that passes the cheap tests.
func (r *Reader) findFrame(from int64) (int64, bool, error) {
	end := min(r.size, from-1+frameReach)
	var (
		chunk   []byte
		base    = from // file offset of chunk[0]
		scratch []byte
	)
	for c := from; c < end; c++ {
		// Keep the candidate's length field and first record byte in the chunk.
		if c+binary.MaxVarintLen64+1 > base+int64(len(chunk)) && base+int64(len(chunk)) < r.size {
			base = c
			n := min(int64(scanChunkBytes), r.size-c)
			if cap(chunk) < int(n) {
				chunk = make([]byte, n)
			}
			chunk = chunk[:n]
			if _, err := r.src.ReadAt(chunk, base); err != nil && err != io.EOF {
				return 0, false, fmt.Errorf("reading byte offset %d: %v", base, err)
			}
		}
		head := chunk[c-base:]
		length, n := binary.Uvarint(head)
		if n <= 0 || length < minRecordBytes || length > MaxRecordBytes || n >= len(head) || !startsRecord(head[n]) {
			continue
		}
		body := c + int64(n)
		if body+int64(length)+crcBytes > r.size {
			continue
		}
		var frame []byte
		if stop := body + int64(length) + crcBytes; stop <= base+int64(len(chunk)) {
			frame = chunk[body-base : stop-base]
		} else {
			if cap(scratch) < int(length)+crcBytes {
				scratch = make([]byte, int(length)+crcBytes)
			}
			frame = scratch[:int(length)+crcBytes]
			if _, err := r.src.ReadAt(frame, body); err != nil && err != io.EOF {
				return 0, false, fmt.Errorf("reading byte offset %d: %v", body, err)
			}
		}
		payload := frame[:length]
		if checksum(payload) != binary.LittleEndian.Uint32(frame[length:]) {
			continue
		}
		if _, reason := decode(frame); reason == "" {
			return c, true, nil
		}
	}
	return 0, false, nil
}

// startsRecord reports whether b can be the first byte of an encoded
// Record: the tag of one of its fields (1: varint; 2 to 6: length
// delimited).
func startsRecord(b byte) bool {
	switch b {
	case 1<<3 | 0, 2<<3 | 2, 3<<3 | 2, 4<<3 | 2, 5<<3 | 2, 6<<3 | 2:
		return true
	}
	return false
}
