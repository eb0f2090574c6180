package capture

import (
	"encoding/binary"
	"fmt"
	"io"
)

// scanChunkBytes is how much of the file findFrame reads at a time.
const scanChunkBytes = 256 << 10

// headBytes covers a frame's length field and the start of its Record
// that recordShape looks at.
const headBytes = 4 * binary.MaxVarintLen64

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
// is intact. Cost: one pass over the window (it stops at the first valid
// frame, normally a tick's length away), plus a checksum for the rare
// candidate whose bytes have a Record's shape.
func (r *Reader) findFrame(from int64) (int64, bool, error) {
	end := min(r.size, from-1+frameReach)
	var (
		chunk   []byte
		base    = from // file offset of chunk[0]
		scratch []byte
	)
	for c := from; c < end; c++ {
		// Keep the candidate's length field and first record byte in the chunk.
		if c+headBytes > base+int64(len(chunk)) && base+int64(len(chunk)) < r.size {
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
		if n <= 0 || length < minRecordBytes || length > MaxRecordBytes || n >= len(head) || !recordShape(head[n:], length) {
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

// recordShape reports whether b, the start of a candidate Record of length
// bytes, has the layout this package's encoder writes: an optional
// since_start_ns varint (field 1), then one length-delimited kind (fields 2
// to 6) that ends exactly at length. Random bytes almost never pass, so the
// checksum is computed for few candidates. A Record that a foreign encoder
// laid out otherwise is not recognised here; the damage before it is then
// reported as a tail (never silently: the dropped bytes are counted).
func recordShape(b []byte, length uint64) bool {
	pos := 0
	if len(b) > 0 && b[0] == 1<<3|0 {
		_, n := binary.Uvarint(b[1:])
		if n <= 0 {
			return false
		}
		pos = 1 + n
	}
	if pos >= len(b) {
		return false
	}
	switch b[pos] {
	case 2<<3 | 2, 3<<3 | 2, 4<<3 | 2, 5<<3 | 2, 6<<3 | 2:
	default:
		return false
	}
	m, n := binary.Uvarint(b[pos+1:])
	return n > 0 && uint64(pos+1+n)+m == length
}
