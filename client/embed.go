package client

import (
	"crypto/sha256"
	"errors"
	"fmt"
	"io/fs"
	"path"
	"path/filepath"
	"strings"

	pb "tautline/proto/tautline/v1"
	"tautline/sim"
)

// Embed makes an EmbeddedFile with its SHA-256.
func Embed(role pb.EmbeddedFileRole, name string, data []byte) *pb.EmbeddedFile {
	sum := sha256.Sum256(data)
	return &pb.EmbeddedFile{Role: role, Name: name, Content: data, Sha256: sum[:]}
}

// EmbedCellFiles embeds every file the cell was read from, under the name
// it was loaded by: the cell file (first), then figures and URDFs, as the
// daemon does.
func EmbedCellFiles(cell *sim.Cell) []*pb.EmbeddedFile {
	var out []*pb.EmbeddedFile
	for i, src := range cell.Sources {
		role := pb.EmbeddedFileRole_EMBEDDED_FILE_ROLE_FIGURE
		switch {
		case i == 0:
			role = pb.EmbeddedFileRole_EMBEDDED_FILE_ROLE_CELL
		case strings.EqualFold(filepath.Ext(src.Path), ".urdf"):
			role = pb.EmbeddedFileRole_EMBEDDED_FILE_ROLE_URDF
		}
		out = append(out, Embed(role, src.Path, src.Data))
	}
	return out
}

// Embedded is the files a capture's SessionStart carries, by role.
type Embedded struct {
	CellName string // name of the cell file
	CueName  string // name of the cue file
	CueCSV   []byte
	Files    map[string][]byte // every file by its embedded name
}

// EmbeddedFiles collects a SessionStart's files and checks their SHA-256.
func EmbeddedFiles(start *pb.SessionStart) (*Embedded, error) {
	e := &Embedded{Files: map[string][]byte{}}
	for i, f := range start.GetFiles() {
		sum := sha256.Sum256(f.GetContent())
		if len(f.GetSha256()) != 0 && string(sum[:]) != string(f.GetSha256()) {
			return nil, fmt.Errorf("embedded file %d (%s): content does not match its SHA-256", i, f.GetName())
		}
		e.Files[f.GetName()] = f.GetContent()
		switch f.GetRole() {
		case pb.EmbeddedFileRole_EMBEDDED_FILE_ROLE_CELL:
			e.CellName = f.GetName()
		case pb.EmbeddedFileRole_EMBEDDED_FILE_ROLE_CUE:
			e.CueName, e.CueCSV = f.GetName(), f.GetContent()
		}
	}
	if e.CellName == "" {
		return nil, errors.New("the capture embeds no cell file")
	}
	if e.CueName == "" {
		return nil, errors.New("the capture embeds no cue file")
	}
	return e, nil
}

// ReadFile reads an embedded file by the name the cell file's loader asks
// for (a sim.ReadFileFunc).
func (e *Embedded) ReadFile(name string) ([]byte, error) {
	if b, ok := e.Files[name]; ok {
		return b, nil
	}
	clean := path.Clean(filepath.ToSlash(name))
	for n, b := range e.Files {
		if path.Clean(filepath.ToSlash(n)) == clean {
			return b, nil
		}
	}
	return nil, fmt.Errorf("%s: not embedded in the capture: %w", name, fs.ErrNotExist)
}

// Cell loads the embedded cell.
func (e *Embedded) Cell() (*sim.Cell, error) {
	return sim.LoadCell(e.CellName, e.ReadFile)
}
