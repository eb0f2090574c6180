package capture

import (
	"encoding/binary"
	"fmt"
	"hash/crc32"

	"google.golang.org/protobuf/proto"

	tautlinev1 "tautline/proto/tautline/v1"
)

const (
	// FormatVersion is the version this package writes and reads.
	FormatVersion = 1

	// headerPrefix starts every capture file; the version and '\n' follow.
	headerPrefix = "tautline.capture/"

	// MaxRecordBytes bounds one Record's encoded size. The largest record
	// is the SessionStart with its embedded files; 64 MiB leaves room for
	// long cue files sampled finely.
	MaxRecordBytes = 64 << 20

	// minRecordBytes is the smallest valid Record: a kind tag and a zero
	// length submessage.
	minRecordBytes = 2

	crcBytes = 4
)

// header is the header this package writes.
var header = []byte(fmt.Sprintf("%s%d\n", headerPrefix, FormatVersion))

// HeaderSize is the length of the header this package writes, bytes.
var HeaderSize = len(header)

var castagnoli = crc32.MakeTable(crc32.Castagnoli)

// checksum is the CRC32C of a Record's bytes.
func checksum(payload []byte) uint32 { return crc32.Checksum(payload, castagnoli) }

// appendFrame appends rec framed as [uvarint length][payload][CRC32C] to
// dst. The payload is marshalled in place, so a dst with spare capacity
// makes no allocation.
func appendFrame(dst []byte, rec *tautlinev1.Record) ([]byte, error) {
	if rec.GetKind() == nil {
		return dst, fmt.Errorf("capture: record has no kind set")
	}
	size := proto.Size(rec)
	if size > MaxRecordBytes {
		return dst, fmt.Errorf("capture: record of %d bytes exceeds the %d byte maximum (embedded files too large?)", size, MaxRecordBytes)
	}
	start := len(dst)
	dst = binary.AppendUvarint(dst, uint64(size))
	body := len(dst)
	dst, err := proto.MarshalOptions{UseCachedSize: true}.MarshalAppend(dst, rec)
	if err != nil {
		return dst[:start], fmt.Errorf("capture: encoding record: %w", err)
	}
	if len(dst)-body != size {
		return dst[:start], fmt.Errorf("capture: record changed while being encoded")
	}
	return binary.LittleEndian.AppendUint32(dst, checksum(dst[body:])), nil
}

// KindName names a record's kind: session_start, observation, command,
// event or session_end ("unknown" when no kind is set).
func KindName(rec *tautlinev1.Record) string {
	switch rec.GetKind().(type) {
	case *tautlinev1.Record_SessionStart:
		return "session_start"
	case *tautlinev1.Record_Observation:
		return "observation"
	case *tautlinev1.Record_Command:
		return "command"
	case *tautlinev1.Record_Event:
		return "event"
	case *tautlinev1.Record_SessionEnd:
		return "session_end"
	}
	return "unknown"
}
