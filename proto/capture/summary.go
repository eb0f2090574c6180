package capture

import (
	"bytes"
	"crypto/sha256"
	"errors"
	"io"

	tautlinev1 "tautline/proto/tautline/v1"
)

// Kinds lists the record kinds in the order summaries print them.
var Kinds = []string{"session_start", "observation", "command", "event", "session_end"}

// Summary describes one capture file: what session it holds and what
// damage it has.
type Summary struct {
	Path    string
	Size    int64 // bytes
	Version int   // format version (0 if the header was torn)

	Start *tautlinev1.SessionStart // nil if no session_start was read
	End   *tautlinev1.SessionEnd   // nil if the session's end is not in this file

	Records int            // whole records read
	Counts  map[string]int // records by KindName
	// Recorder clock span: since_start_ns of the last record read.
	LastSinceStartNs int64
	// Cue time span of the observations, s (valid when Counts["observation"] > 0).
	FirstCueTimeS, LastCueTimeS float64
	// Continued is set when the part ends by pointing at the next part.
	Continued bool

	// Files checks each embedded file's SHA-256 against its content.
	Files []FileCheck

	Damage  *Damage       // torn or corrupt tail dropped, or nil
	Corrupt *CorruptError // damage with valid records after it, or nil
}

// FileCheck is one embedded file and whether its digest matches.
type FileCheck struct {
	Role     tautlinev1.EmbeddedFileRole
	Name     string
	Bytes    int
	DigestOK bool
}

// Summarize reads the capture at path to the end. Damage is reported in
// the Summary, not as an error; the error is for a file that cannot be read
// as a capture at all.
func Summarize(path string) (*Summary, error) {
	r, err := Open(path)
	if err != nil {
		return nil, err
	}
	defer r.Close()
	s := &Summary{Path: path, Size: r.Size(), Version: r.Version(), Counts: map[string]int{}}
	for {
		rec, err := r.Next()
		if errors.Is(err, io.EOF) {
			s.Damage = r.Damage()
			return s, nil
		}
		var corrupt *CorruptError
		if errors.As(err, &corrupt) {
			s.Corrupt = corrupt
			return s, nil
		}
		if err != nil {
			return s, err
		}
		s.add(rec)
	}
}

func (s *Summary) add(rec *tautlinev1.Record) {
	s.Records++
	s.Counts[KindName(rec)]++
	s.LastSinceStartNs = rec.GetSinceStartNs()
	s.Continued = false
	switch k := rec.GetKind().(type) {
	case *tautlinev1.Record_SessionStart:
		s.Start = k.SessionStart
		for _, f := range k.SessionStart.GetFiles() {
			sum := sha256.Sum256(f.GetContent())
			s.Files = append(s.Files, FileCheck{Role: f.GetRole(), Name: f.GetName(), Bytes: len(f.GetContent()), DigestOK: bytes.Equal(sum[:], f.GetSha256())})
		}
	case *tautlinev1.Record_Observation:
		t := k.Observation.GetCueTimeS()
		if s.Counts["observation"] == 1 {
			s.FirstCueTimeS = t
		}
		s.LastCueTimeS = t
	case *tautlinev1.Record_Event:
		s.Continued = k.Event.GetKind() == tautlinev1.EventKind_EVENT_KIND_CONTINUED_IN_NEXT_PART
	case *tautlinev1.Record_SessionEnd:
		s.End = k.SessionEnd
	}
}
