package capture

import (
	"bufio"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"os"

	"google.golang.org/protobuf/proto"

	tautlinev1 "tautline/proto/tautline/v1"
)

// Damage describes the torn or corrupt tail of a capture that a Reader
// dropped: every whole record before Offset was returned.
type Damage struct {
	// Offset is where the dropped bytes start, bytes from the file's
	// start: the end of the last whole record (or 0 for a bad header).
	Offset int64
	// BytesDropped is the number of bytes from Offset to the end.
	BytesDropped int64
	// Reason says what was wrong at Offset.
	Reason string
}

func (d *Damage) String() string {
	return fmt.Sprintf("%d bytes dropped from byte offset %d: %s", d.BytesDropped, d.Offset, d.Reason)
}

// CorruptError reports a damaged record with a valid record after it: not a
// torn tail, so the Reader stops rather than skip part of the session.
type CorruptError struct {
	Name   string // file name, if the Reader knows it
	Offset int64  // byte offset of the damaged record's frame
	Reason string
	// NextValidOffset is the byte offset of the valid record found after it.
	NextValidOffset int64
}

func (e *CorruptError) Error() string {
	name := e.Name
	if name == "" {
		name = "capture"
	}
	return fmt.Sprintf("%s: corrupt record at byte offset %d (%s); a valid record follows at byte offset %d, so records after the damage were not read",
		name, e.Offset, e.Reason, e.NextValidOffset)
}

// Reader reads the records of one capture file in order.
type Reader struct {
	name    string
	src     io.ReaderAt
	size    int64
	file    *os.File // closed by Close when Open made the Reader
	br      *bufio.Reader
	version int

	off     int64  // offset of the next frame
	last    int64  // offset of the last record returned
	payload []byte // reused for each record's bytes
	damage  *Damage
	err     error // io.EOF or a terminal error, returned from then on
}

// Open opens the capture file at path. Close it when done.
func Open(path string) (*Reader, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("capture: %w", err)
	}
	st, err := f.Stat()
	if err != nil {
		f.Close()
		return nil, fmt.Errorf("capture: %w", err)
	}
	r, err := newReader(path, f, st.Size())
	if err != nil {
		f.Close()
		return nil, err
	}
	r.file = f
	return r, nil
}

// NewReader reads a capture of size bytes from src. It reads the header
// and fails if src is not a capture or has a format version this package
// does not read; a header cut short by a crash reads as no records and a
// Damage.
func NewReader(src io.ReaderAt, size int64) (*Reader, error) {
	return newReader("", src, size)
}

func newReader(name string, src io.ReaderAt, size int64) (*Reader, error) {
	r := &Reader{name: name, src: src, size: size, last: -1}
	// A buffer no larger than the file: small captures are read often
	// (tests, fuzzing), large ones in 64 KiB reads.
	r.br = bufio.NewReaderSize(io.NewSectionReader(src, 0, size), int(max(16, min(size, 64<<10))))
	if err := r.readHeader(); err != nil {
		return nil, err
	}
	return r, nil
}

func (r *Reader) errorf(format string, args ...any) error {
	name := r.name
	if name == "" {
		name = "capture"
	}
	return fmt.Errorf(name+": "+format, args...)
}

// readHeader checks "tautline.capture/<version>\n".
func (r *Reader) readHeader() error {
	const maxDigits = 9
	n := int(min(r.size, int64(len(headerPrefix)+maxDigits+1)))
	b := make([]byte, n)
	if _, err := io.ReadFull(r.br, b); err != nil {
		return r.errorf("reading header: %v", err)
	}
	p := min(len(b), len(headerPrefix))
	if string(b[:p]) != headerPrefix[:p] {
		return r.errorf("not a tautline capture (it does not start with %q)", headerPrefix)
	}
	version, digits := 0, 0
	for _, c := range b[p:] {
		if c == '\n' {
			break
		}
		if c < '0' || c > '9' || digits == maxDigits {
			return r.errorf("malformed header: the format version is not a number")
		}
		version = version*10 + int(c-'0')
		digits++
	}
	end := p + digits + 1 // just past '\n'
	if end > len(b) {
		if int64(len(b)) == r.size { // the file ends inside the header
			r.damage = &Damage{Offset: 0, BytesDropped: r.size, Reason: "the file ends inside the header"}
			r.err = io.EOF
			return nil
		}
		return r.errorf("malformed header: no end of line after the format version")
	}
	if digits == 0 {
		return r.errorf("malformed header: no format version")
	}
	if version != FormatVersion {
		return r.errorf("capture format version %d; this build reads version %d", version, FormatVersion)
	}
	r.version = version
	r.off = int64(end)
	// Rewind the buffered reader to just past the header.
	r.br.Reset(io.NewSectionReader(r.src, r.off, r.size-r.off))
	return nil
}

// Version returns the capture's format version (0 if the header was torn).
func (r *Reader) Version() int { return r.version }

// Size returns the capture's size, bytes.
func (r *Reader) Size() int64 { return r.size }

// Next returns the next record. It returns io.EOF after the last whole
// record, whether the file ended cleanly or had a torn or corrupt tail (see
// Damage), and a *CorruptError when damage is followed by valid records.
// The record is the caller's to keep.
func (r *Reader) Next() (*tautlinev1.Record, error) {
	if r.err != nil {
		return nil, r.err
	}
	start := r.off
	if start == r.size {
		r.err = io.EOF
		return nil, r.err
	}
	length, n, reason, err := r.readLength(start)
	if err != nil {
		return nil, r.fatal(err)
	}
	if reason != "" {
		return nil, r.damaged(start, reason)
	}
	remaining := r.size - start - int64(n)
	switch {
	case length < minRecordBytes:
		return nil, r.damaged(start, fmt.Sprintf("length field says %d bytes, below the smallest record (%d)", length, minRecordBytes))
	case length > MaxRecordBytes:
		return nil, r.damaged(start, fmt.Sprintf("length field says %d bytes, above the largest record (%d)", length, MaxRecordBytes))
	case int64(length)+crcBytes > remaining:
		return nil, r.damaged(start, fmt.Sprintf("length field says %d bytes and a 4 byte checksum, but only %d bytes remain", length, remaining))
	}
	if cap(r.payload) < int(length)+crcBytes {
		r.payload = make([]byte, int(length)+crcBytes)
	}
	buf := r.payload[:int(length)+crcBytes]
	if _, err := io.ReadFull(r.br, buf); err != nil {
		return nil, r.fatal(fmt.Errorf("reading record at byte offset %d: %v (did the file change while being read?)", start, err))
	}
	rec, reason := decode(buf)
	if reason != "" {
		return nil, r.damaged(start, reason)
	}
	r.last = start
	r.off = start + int64(n) + int64(length) + crcBytes
	return rec, nil
}

// decode checks a frame's body (record bytes then checksum) and decodes it;
// it returns why it is not a record otherwise.
func decode(buf []byte) (*tautlinev1.Record, string) {
	payload, sum := buf[:len(buf)-crcBytes], binary.LittleEndian.Uint32(buf[len(buf)-crcBytes:])
	if got := checksum(payload); got != sum {
		return nil, fmt.Sprintf("checksum mismatch (stored %08x, computed %08x)", sum, got)
	}
	rec := new(tautlinev1.Record)
	if err := proto.Unmarshal(payload, rec); err != nil {
		return nil, fmt.Sprintf("checksum matches but the record does not decode: %v", err)
	}
	if rec.GetKind() == nil {
		return nil, "checksum matches but the record has no kind (written by a newer version?)"
	}
	return rec, ""
}

// readLength reads the uvarint length at start from the buffered reader;
// reason is set when the bytes are not a length field.
func (r *Reader) readLength(start int64) (length uint64, n int, reason string, err error) {
	var shift uint
	for n = 0; n < binary.MaxVarintLen64; n++ {
		if start+int64(n) >= r.size {
			return 0, n, "the file ends inside a length field", nil
		}
		b, err := r.br.ReadByte()
		if err != nil {
			return 0, n, "", fmt.Errorf("reading byte offset %d: %v (did the file change while being read?)", start+int64(n), err)
		}
		if n == binary.MaxVarintLen64-1 && b > 1 {
			break
		}
		length |= uint64(b&0x7f) << shift
		if b < 0x80 {
			return length, n + 1, "", nil
		}
		shift += 7
	}
	return 0, n, "malformed length field (overflows 64 bits)", nil
}

func (r *Reader) fatal(err error) error {
	r.err = r.errorf("%v", err)
	return r.err
}

// damaged ends reading at the damaged frame at start: a *CorruptError if a
// valid frame follows within reach, else a torn tail (io.EOF and Damage).
func (r *Reader) damaged(start int64, reason string) error {
	next, found, err := r.findFrame(start + 1)
	if err != nil {
		return r.fatal(err)
	}
	if found {
		r.err = &CorruptError{Name: r.name, Offset: start, Reason: reason, NextValidOffset: next}
		return r.err
	}
	r.damage = &Damage{Offset: start, BytesDropped: r.size - start, Reason: reason}
	r.err = io.EOF
	return r.err
}

// Damage describes the tail dropped by the Reader, or is nil if none was.
// It is final once Next has returned io.EOF.
func (r *Reader) Damage() *Damage { return r.damage }

// Offset returns the byte offset of the last record Next returned, or -1.
func (r *Reader) Offset() int64 { return r.last }

// End returns the byte offset just past the last whole record read (the
// header's end before any): the length of the valid prefix so far.
func (r *Reader) End() int64 { return r.off }

// Close closes the file if Open made the Reader.
func (r *Reader) Close() error {
	if r.file == nil {
		return nil
	}
	err := r.file.Close()
	r.file = nil
	return err
}

// ReadFile reads every record of the capture at path. A torn tail is not an
// error: the records before it are returned with its Damage.
func ReadFile(path string) ([]*tautlinev1.Record, *Damage, error) {
	r, err := Open(path)
	if err != nil {
		return nil, nil, err
	}
	defer r.Close()
	var recs []*tautlinev1.Record
	for {
		rec, err := r.Next()
		if errors.Is(err, io.EOF) {
			return recs, r.Damage(), nil
		}
		if err != nil {
			return recs, nil, err
		}
		recs = append(recs, rec)
	}
}
