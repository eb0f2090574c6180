package capture

import (
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
)

// RepairSettings configures Repair. The zero value repairs torn and corrupt
// tails only.
type RepairSettings struct {
	// CutAtCorruption lets Repair cut a capture at damage that valid
	// records follow, dropping those records from the repaired file (the
	// original is kept aside all the same). Without it Repair refuses such
	// a capture.
	CutAtCorruption bool
}

// RepairReport says what Repair did.
type RepairReport struct {
	Path string // the repaired capture
	// KeptAs is where the original was kept; empty when nothing was done.
	KeptAs string
	// Records is the number of whole records in the repaired file.
	Records int
	// BytesKept is the repaired file's size, bytes.
	BytesKept int64
	// Damage is what was cut; nil when the capture had none.
	Damage *Damage
}

// DamagedSuffix is appended to a repaired capture's name to keep its
// original.
const DamagedSuffix = ".damaged"

// Repair rewrites the capture at path as its longest valid prefix: the
// header and every whole record before the damage. The original is kept
// byte for byte as path+DamagedSuffix (Repair refuses to overwrite one).
// A capture without damage is left alone (KeptAs is empty). At no moment
// is path missing: the original is hard-linked aside (renamed where links
// are not supported) and the repaired copy renamed over it.
func Repair(path string, s RepairSettings) (*RepairReport, error) {
	r, err := Open(path)
	if err != nil {
		return nil, err
	}
	defer r.Close()
	rep := &RepairReport{Path: path}
	for {
		_, err := r.Next()
		if err == nil {
			rep.Records++
			continue
		}
		var corrupt *CorruptError
		switch {
		case errors.Is(err, io.EOF):
			rep.Damage = r.Damage()
		case errors.As(err, &corrupt):
			if !s.CutAtCorruption {
				return nil, fmt.Errorf("%w; repairing would drop those records: cut there only if that is what you want", err)
			}
			rep.Damage = &Damage{Offset: corrupt.Offset, BytesDropped: r.Size() - corrupt.Offset,
				Reason: fmt.Sprintf("%s (valid records followed from byte offset %d and were dropped too)", corrupt.Reason, corrupt.NextValidOffset)}
		default:
			return nil, err
		}
		break
	}
	if rep.Damage == nil {
		rep.BytesKept = r.Size()
		return rep, nil
	}
	keep := rep.Damage.Offset
	kept := path + DamagedSuffix
	if _, err := os.Lstat(kept); err == nil {
		return nil, fmt.Errorf("capture: %s already exists; move it away before repairing %s again", kept, path)
	}
	tmp := path + ".repairing"
	out, err := os.OpenFile(tmp, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o644)
	if err != nil {
		return nil, fmt.Errorf("capture: %w", err)
	}
	err = writePrefix(out, r, keep)
	if cerr := out.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		os.Remove(tmp)
		return nil, fmt.Errorf("capture: writing %s: %w", tmp, err)
	}
	if err := os.Link(path, kept); err != nil {
		if err := os.Rename(path, kept); err != nil {
			os.Remove(tmp)
			return nil, fmt.Errorf("capture: keeping the original: %w", err)
		}
	}
	if err := os.Rename(tmp, path); err != nil {
		return nil, fmt.Errorf("capture: %w (the original is %s, the repaired copy %s)", err, kept, tmp)
	}
	if err := syncDir(filepath.Dir(path)); err != nil {
		return nil, err
	}
	rep.KeptAs = kept
	rep.BytesKept = max(keep, int64(HeaderSize))
	return rep, nil
}

// writePrefix writes the first n bytes of r's capture (a fresh header when
// the header itself was torn) and fsyncs.
func writePrefix(out *os.File, r *Reader, n int64) error {
	var err error
	if n == 0 {
		_, err = out.Write(header)
	} else {
		_, err = io.Copy(out, io.NewSectionReader(r.src, 0, n))
	}
	if err != nil {
		return err
	}
	return out.Sync()
}
