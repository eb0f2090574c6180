package capture

import (
	"crypto/sha256"
	"errors"
	"io/fs"
	"os"

	tautlinev1 "tautline/proto/tautline/v1"
)

// EmbedFile makes the SessionStart entry for a file the session runs with:
// its role, the name it was loaded under, its bytes and their SHA-256.
func EmbedFile(role tautlinev1.EmbeddedFileRole, name string, content []byte) *tautlinev1.EmbeddedFile {
	sum := sha256.Sum256(content)
	return &tautlinev1.EmbeddedFile{Role: role, Name: name, Content: content, Sha256: sum[:]}
}

// Parts lists the files of the capture written to path, in order: path
// itself if it exists, else the parts PartPath(path, 1), 2, ... up to the
// first missing one. It returns an error naming path when there are none.
func Parts(path string) ([]string, error) {
	if _, err := os.Stat(path); err == nil {
		return []string{path}, nil
	} else if !errors.Is(err, fs.ErrNotExist) {
		return nil, err
	}
	var parts []string
	for n := 1; ; n++ {
		p := PartPath(path, n)
		if _, err := os.Stat(p); err != nil {
			if !errors.Is(err, fs.ErrNotExist) {
				return nil, err
			}
			break
		}
		parts = append(parts, p)
	}
	if len(parts) == 0 {
		return nil, &fs.PathError{Op: "capture", Path: path, Err: errors.New("no such file, and no parts " + PartPath(path, 1) + ", ...")}
	}
	return parts, nil
}
