package server

import (
	"crypto/sha256"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"time"

	"go.uber.org/zap"

	"tautline/proto/capture"
	pb "tautline/proto/tautline/v1"
	"tautline/sim"
)

// recorder writes one session's capture. Its methods are called with the
// cell's lock held, from the tick path and from operator calls; Write only
// encodes into the capture Writer's buffer (the fsync runs on the Writer's
// own goroutine), so recording a tick allocates nothing and never waits for
// the disk, except for the buffer's occasional move to the page cache.
type recorder struct {
	w     *capture.Writer
	path  string
	start time.Time
	log   *zap.Logger

	rec     pb.Record
	obsKind pb.Record_Observation
	cmdKind pb.Record_Command
	failed  bool

	metrics   *CellMetrics // nil: none
	lastBytes int64        // capture bytes already counted in metrics
}

// recorderVersion names the program in SessionStart.recorder.
const recorderVersion = "tautlined 0.1.0"

// sourceRole says what a cell source file is: the first is the cell file,
// URDFs end in .urdf, the rest are figures.
func sourceRole(i int, path string) pb.EmbeddedFileRole {
	switch {
	case i == 0:
		return pb.EmbeddedFileRole_EMBEDDED_FILE_ROLE_CELL
	case strings.EqualFold(filepath.Ext(path), ".urdf"):
		return pb.EmbeddedFileRole_EMBEDDED_FILE_ROLE_URDF
	default:
		return pb.EmbeddedFileRole_EMBEDDED_FILE_ROLE_FIGURE
	}
}

func embed(role pb.EmbeddedFileRole, name string, data []byte) *pb.EmbeddedFile {
	sum := sha256.Sum256(data)
	return &pb.EmbeddedFile{Role: role, Name: name, Content: data, Sha256: sum[:]}
}

// newRecorder creates the capture of a new session in dir and writes its
// SessionStart, embedding the cell's sources and the cue (and reference).
func newRecorder(cfg *Config, cell *sim.Cell, lc *loadedCue, sessionID string, now time.Time, log *zap.Logger) (*recorder, error) {
	if err := os.MkdirAll(cfg.CaptureDir, 0o755); err != nil {
		return nil, fmt.Errorf("capture directory: %w", err)
	}
	name := fmt.Sprintf("%s-%s-%s.tlcap", safeName(cell.Name), now.UTC().Format("20060102T150405"), sessionID)
	path := filepath.Join(cfg.CaptureDir, name)
	w, err := capture.Create(path, capture.Settings{
		FlushInterval: seconds(cfg.CaptureFlushIntervalS),
		MaxFileBytes:  cfg.CaptureMaxFileBytes,
	})
	if err != nil {
		return nil, err
	}
	start := &pb.SessionStart{
		SessionId:   sessionID,
		CellName:    cell.Name,
		CueName:     lc.name,
		StartUnixNs: now.UnixNano(),
		JointNames:  append([]string(nil), cell.JointNames()...),
		TickPeriodS: cell.TickS,
		Recorder:    recorderVersion,
	}
	for i, src := range cell.Sources {
		start.Files = append(start.Files, embed(sourceRole(i, src.Path), src.Path, src.Data))
	}
	start.Files = append(start.Files, embed(pb.EmbeddedFileRole_EMBEDDED_FILE_ROLE_CUE, lc.fileName, lc.csv))
	if lc.refCSV != nil {
		start.Files = append(start.Files, embed(pb.EmbeddedFileRole_EMBEDDED_FILE_ROLE_REFERENCE, lc.refFileName, lc.refCSV))
	}
	if err := w.Write(&pb.Record{Kind: &pb.Record_SessionStart{SessionStart: start}}); err != nil {
		w.Close()
		os.Remove(path)
		return nil, err
	}
	if cfg.CaptureMaxFileBytes > 0 {
		path = w.Files()[0]
	}
	return &recorder{w: w, path: path, start: now, log: log}, nil
}

func safeName(s string) string {
	return strings.Map(func(r rune) rune {
		switch {
		case r >= 'a' && r <= 'z', r >= 'A' && r <= 'Z', r >= '0' && r <= '9', r == '-', r == '_', r == '.':
			return r
		}
		return '_'
	}, s)
}

func (r *recorder) write(rec *pb.Record) {
	if r.failed {
		return
	}
	rec.SinceStartNs = int64(time.Since(r.start))
	if err := r.w.Write(rec); err != nil {
		// A fatal write error stops the recording (capture.Writer keeps
		// it); the session goes on and says so once.
		if r.w.Err() != nil {
			r.failed = true
			r.log.Error("capture recording stopped; the session continues unrecorded", zap.String("capture", r.path), zap.Error(err))
			return
		}
		r.log.Warn("capture record refused", zap.String("capture", r.path), zap.Error(err))
	}
	if r.metrics != nil {
		b := r.w.Stats().Bytes
		r.metrics.CaptureWritten(int(b - r.lastBytes))
		r.lastBytes = b
	}
}

// observation records a received observation as it came, accepted or not.
func (r *recorder) observation(obs *pb.Observation) {
	r.obsKind.Observation = obs
	r.rec.Kind = &r.obsKind
	r.write(&r.rec)
	r.obsKind.Observation = nil
}

// command records the command sent for a tick.
func (r *recorder) command(cmd *pb.Command) {
	r.cmdKind.Command = cmd
	r.rec.Kind = &r.cmdKind
	r.write(&r.rec)
	r.cmdKind.Command = nil
}

func (r *recorder) event(ev *pb.Event) {
	r.write(&pb.Record{Kind: &pb.Record_Event{Event: ev}})
}

// close writes the SessionEnd and closes the capture, making it durable.
func (r *recorder) close(reason string, ticks uint64) error {
	r.write(&pb.Record{Kind: &pb.Record_SessionEnd{SessionEnd: &pb.SessionEnd{
		EndUnixNs: time.Now().UnixNano(),
		Reason:    reason,
		Ticks:     ticks,
	}}})
	start := time.Now()
	err := r.w.Close()
	r.metrics.CaptureFlushed(time.Since(start).Seconds())
	return err
}
