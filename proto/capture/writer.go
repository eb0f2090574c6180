package capture

import (
	"bufio"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"time"

	"google.golang.org/protobuf/proto"

	tautlinev1 "tautline/proto/tautline/v1"
)

const (
	// DefaultFlushInterval is how often a Writer fsyncs when
	// Settings.FlushInterval is zero: at most this much of a session is at
	// risk in a machine crash (a process crash loses only the buffer).
	DefaultFlushInterval = 100 * time.Millisecond

	// DefaultBufferBytes is the Writer's buffer when Settings.BufferBytes
	// is zero.
	DefaultBufferBytes = 64 << 10
)

// ErrClosed is returned by a Writer's methods after Close.
var ErrClosed = errors.New("capture: writer is closed")

// Settings configures a Writer. The zero value means the documented
// defaults.
type Settings struct {
	// FlushInterval is how often the Writer's own goroutine moves the
	// buffer to the file and fsyncs it. Zero means DefaultFlushInterval;
	// negative means no goroutine: the caller calls Sync.
	FlushInterval time.Duration

	// SyncTicks, if not nil, replaces the Writer's timer: its goroutine
	// syncs once per value received, and FlushInterval is ignored. Tests
	// drive the flush clock this way.
	SyncTicks <-chan time.Time

	// BufferBytes is the size of the in-memory buffer. Zero means
	// DefaultBufferBytes. When a record does not fit, Write moves the
	// buffer to the file (a write, not an fsync).
	BufferBytes int

	// MaxFileBytes, if positive, splits the capture into parts: once the
	// next record would take a part past MaxFileBytes, the part ends with
	// an EVENT_KIND_CONTINUED_IN_NEXT_PART event, is fsynced and closed,
	// and the next part opens with the session's SessionStart. It is a soft
	// bound: that event, and a single record larger than the bound, may
	// take a part past it. Zero means one file, never split.
	MaxFileBytes int64
}

// Stats counts what a Writer has done.
type Stats struct {
	// Records is the number of records accepted by Write.
	Records int64
	// SyncedRecords is how many of them are known to be on disk (their
	// part fsynced after they were written).
	SyncedRecords int64
	// Bytes is the number of bytes written to all parts, headers included
	// (bytes still in the buffer count).
	Bytes int64
	// Syncs counts successful fsyncs of buffered records.
	Syncs int64
	// Parts is the number of files created.
	Parts int
}

// Writer records a session to a capture file.
//
// Its methods are safe for concurrent use. Write holds the Writer's lock
// while it encodes into the buffer (and, when the buffer is full, writes it
// to the file); Sync holds it only while moving the buffer to the file, and
// fsyncs outside it, so a Write never waits for a disk flush — except when
// a part ends, which waits for a running fsync and fsyncs the old part.
type Writer struct {
	path     string
	settings Settings

	mu      sync.Mutex
	synced  *sync.Cond // signalled when syncing drops
	syncing int        // fsyncs running outside mu
	f       partFile
	buf     *bufio.Writer
	frame   []byte // encoding scratch
	files   []string
	start   *tautlinev1.Record // the session's SessionStart record
	dirty   bool               // records written since the last sync began
	// partBytes is the current part's size and partRecords the caller's
	// records in it.
	partBytes   int64
	partRecords int
	stats       Stats
	err         error // fatal: the recording stopped
	closed      bool

	stop chan struct{} // closed by Close to end the sync goroutine
	done chan struct{} // closed by the sync goroutine when it ends
}

// partFile is what a Writer needs of a file; tests substitute failing ones.
type partFile interface {
	Write(p []byte) (int, error)
	Sync() error
	Close() error
	Name() string
}

// createPart creates a new part file, refusing to replace one.
var createPart = func(name string) (partFile, error) {
	return os.OpenFile(name, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o644)
}

// PartPath names part n (from 1) of a capture split by Settings.MaxFileBytes:
// "run.tlcap" gives "run-0001.tlcap", "run-0002.tlcap", ...
func PartPath(path string, n int) string {
	ext := filepath.Ext(path)
	return fmt.Sprintf("%s-%04d%s", strings.TrimSuffix(path, ext), n, ext)
}

// Create starts a capture at path (or its first part, PartPath(path, 1),
// when s.MaxFileBytes is set). It refuses to replace an existing file. The
// header is on disk when Create returns. The first record written must be
// the SessionStart.
func Create(path string, s Settings) (*Writer, error) {
	if s.BufferBytes < 0 {
		return nil, fmt.Errorf("capture: Settings.BufferBytes is %d; want 0 (default) or more", s.BufferBytes)
	}
	if s.MaxFileBytes < 0 {
		return nil, fmt.Errorf("capture: Settings.MaxFileBytes is %d; want 0 (no split) or more", s.MaxFileBytes)
	}
	if s.BufferBytes == 0 {
		s.BufferBytes = DefaultBufferBytes
	}
	if s.FlushInterval == 0 {
		s.FlushInterval = DefaultFlushInterval
	}
	w := &Writer{path: path, settings: s}
	w.synced = sync.NewCond(&w.mu)
	if err := w.openPart(); err != nil {
		return nil, err
	}
	ticks := s.SyncTicks
	var ticker *time.Ticker
	if ticks == nil && s.FlushInterval > 0 {
		ticker = time.NewTicker(s.FlushInterval)
		ticks = ticker.C
	}
	if ticks != nil {
		w.stop = make(chan struct{})
		w.done = make(chan struct{})
		go w.syncLoop(ticks, ticker)
	}
	return w, nil
}

func (w *Writer) syncLoop(ticks <-chan time.Time, ticker *time.Ticker) {
	defer close(w.done)
	if ticker != nil {
		defer ticker.Stop()
	}
	for {
		select {
		case <-w.stop:
			return
		case <-ticks:
			// An error is kept by the Writer and returned by the next
			// Write, Sync or Close.
			_ = w.Sync()
		}
	}
}

// openPart creates the next part, writes its header (and, after the first
// part, the SessionStart) and makes it durable, directory entry included.
// Called with mu held, or before the Writer is shared.
func (w *Writer) openPart() error {
	n := len(w.files) + 1
	name := w.path
	if w.settings.MaxFileBytes > 0 {
		name = PartPath(w.path, n)
	}
	f, err := createPart(name)
	if err != nil {
		return fmt.Errorf("capture: creating %w", err)
	}
	w.f = f
	w.files = append(w.files, name)
	w.stats.Parts = n
	if w.buf == nil {
		w.buf = bufio.NewWriterSize(f, w.settings.BufferBytes)
	} else {
		w.buf.Reset(f)
	}
	w.partBytes, w.partRecords = 0, 0
	if err := w.put(header); err != nil {
		return err
	}
	if w.start != nil {
		start := proto.Clone(w.start).(*tautlinev1.Record)
		start.GetSessionStart().Part = uint32(n)
		if err := w.putRecord(start); err != nil {
			return err
		}
	}
	if err := w.buf.Flush(); err != nil {
		return fmt.Errorf("capture: writing %s: %w", name, err)
	}
	if err := f.Sync(); err != nil {
		return fmt.Errorf("capture: fsync %s: %w", name, err)
	}
	return syncDir(filepath.Dir(name))
}

// syncDir makes a new file's directory entry durable.
func syncDir(dir string) error {
	d, err := os.Open(dir)
	if err != nil {
		return fmt.Errorf("capture: opening directory to fsync it: %w", err)
	}
	err = d.Sync()
	if cerr := d.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return fmt.Errorf("capture: fsync directory %s: %w", dir, err)
	}
	return nil
}

// put appends bytes to the current part's buffer. Called with mu held.
func (w *Writer) put(b []byte) error {
	if _, err := w.buf.Write(b); err != nil {
		return fmt.Errorf("capture: writing %s: %w", w.f.Name(), err)
	}
	w.partBytes += int64(len(b))
	w.stats.Bytes += int64(len(b))
	w.dirty = true
	return nil
}

// putRecord frames and appends rec. Called with mu held.
func (w *Writer) putRecord(rec *tautlinev1.Record) error {
	frame, err := appendFrame(w.frame[:0], rec)
	w.keepScratch(frame)
	if err != nil {
		return err
	}
	return w.put(frame)
}

// keepScratch keeps an encoding buffer for the next record unless a large
// record (the SessionStart with its files) grew it past what ticks need.
func (w *Writer) keepScratch(frame []byte) {
	if cap(frame) > 1<<20 {
		frame = nil
	}
	w.frame = frame[:0]
}

// fail stops the recording with err unless it already stopped. Called with
// mu held; returns the error that stopped it.
func (w *Writer) fail(err error) error {
	if w.err == nil {
		w.err = fmt.Errorf("%w (recording stopped; %d of %d records known on disk)", err, w.stats.SyncedRecords, w.stats.Records)
	}
	return w.err
}

// Write appends rec to the capture. The first record must be the
// SessionStart, and only the first. A SessionEnd is made durable before
// Write returns (Write syncs after it). A record the format cannot hold (no
// kind, over MaxRecordBytes) is refused with an error and nothing written;
// the recording goes on. A write error is fatal: see Err.
//
// Write keeps no reference to rec.
func (w *Writer) Write(rec *tautlinev1.Record) error {
	if err := w.write(rec); err != nil {
		return err
	}
	if rec.GetSessionEnd() != nil {
		return w.Sync()
	}
	return nil
}

func (w *Writer) write(rec *tautlinev1.Record) error {
	w.mu.Lock()
	defer w.mu.Unlock()
	if w.err != nil {
		return w.err
	}
	if w.closed {
		return ErrClosed
	}
	isStart := rec.GetSessionStart() != nil
	switch {
	case w.start == nil && !isStart:
		return fmt.Errorf("capture: the first record must be a session_start, not %s", KindName(rec))
	case w.start != nil && isStart:
		return fmt.Errorf("capture: a capture holds one session_start; start another capture for another session")
	}
	if w.settings.MaxFileBytes > 0 && w.partRecords > 0 {
		size := int64(proto.Size(rec))
		if w.partBytes+size+crcBytes+2 > w.settings.MaxFileBytes {
			if err := w.nextPart(rec.GetSinceStartNs()); err != nil {
				return w.fail(err)
			}
		}
	}
	if isStart {
		start := proto.Clone(rec).(*tautlinev1.Record)
		start.GetSessionStart().Part = 1
		rec = start
	}
	frame, err := appendFrame(w.frame[:0], rec)
	w.keepScratch(frame)
	if err != nil {
		return err // refused; nothing written
	}
	if err := w.put(frame); err != nil {
		return w.fail(err)
	}
	if isStart {
		w.start = rec
	}
	w.partRecords++
	w.stats.Records++
	return nil
}

// nextPart ends the current part and opens the next. Called with mu held;
// it waits for running fsyncs, since the old part's file is closed.
func (w *Writer) nextPart(sinceStartNs int64) error {
	next := PartPath(w.path, len(w.files)+1)
	cont := &tautlinev1.Record{SinceStartNs: sinceStartNs, Kind: &tautlinev1.Record_Event{Event: &tautlinev1.Event{
		Kind:   tautlinev1.EventKind_EVENT_KIND_CONTINUED_IN_NEXT_PART,
		Reason: "continued in " + filepath.Base(next),
	}}}
	if err := w.putRecord(cont); err != nil {
		return err
	}
	for w.syncing > 0 {
		w.synced.Wait()
	}
	if err := w.flushSyncClose(); err != nil {
		return err
	}
	w.stats.SyncedRecords = w.stats.Records
	return w.openPart()
}

// flushSyncClose makes the current part durable and closes it. Called with
// mu held and no fsync running.
func (w *Writer) flushSyncClose() error {
	f := w.f
	w.f = nil
	err := w.buf.Flush()
	if err != nil {
		err = fmt.Errorf("capture: writing %s: %w", f.Name(), err)
	} else if err = f.Sync(); err != nil {
		err = fmt.Errorf("capture: fsync %s: %w", f.Name(), err)
	}
	if cerr := f.Close(); err == nil && cerr != nil {
		err = fmt.Errorf("capture: closing %w", cerr)
	}
	return err
}

// Sync moves buffered records to the file and fsyncs it. Every record
// written before Sync was called is on disk when it returns nil. A failure
// stops the recording and is returned, then and by every later call.
func (w *Writer) Sync() error {
	w.mu.Lock()
	defer w.mu.Unlock()
	if w.err != nil {
		return w.err
	}
	if w.closed {
		return ErrClosed
	}
	if !w.dirty {
		return nil
	}
	if err := w.buf.Flush(); err != nil {
		return w.fail(fmt.Errorf("capture: writing %s: %w", w.f.Name(), err))
	}
	w.dirty = false
	f, records := w.f, w.stats.Records
	w.syncing++
	w.mu.Unlock()
	err := f.Sync()
	w.mu.Lock()
	w.syncing--
	w.synced.Broadcast()
	if err != nil {
		return w.fail(fmt.Errorf("capture: fsync %s: %w", f.Name(), err))
	}
	if records > w.stats.SyncedRecords {
		w.stats.SyncedRecords = records
	}
	w.stats.Syncs++
	return nil
}

// Close stops the sync goroutine, makes every record durable and closes the
// file. It returns the error that stopped the recording, if any; calling it
// again returns the same.
func (w *Writer) Close() error {
	w.mu.Lock()
	if w.closed {
		defer w.mu.Unlock()
		return w.err
	}
	w.closed = true
	w.mu.Unlock()
	if w.stop != nil {
		close(w.stop)
		<-w.done
	}
	w.mu.Lock()
	defer w.mu.Unlock()
	for w.syncing > 0 {
		w.synced.Wait()
	}
	if w.f == nil { // a failed part switch already closed it
		return w.err
	}
	if w.err != nil {
		w.f.Close()
		w.f = nil
		return w.err
	}
	if err := w.flushSyncClose(); err != nil {
		return w.fail(err)
	}
	w.stats.SyncedRecords = w.stats.Records
	w.stats.Syncs++
	return nil
}

// Err returns the error that stopped the recording, or nil.
func (w *Writer) Err() error {
	w.mu.Lock()
	defer w.mu.Unlock()
	return w.err
}

// Stats returns the Writer's counts so far.
func (w *Writer) Stats() Stats {
	w.mu.Lock()
	defer w.mu.Unlock()
	return w.stats
}

// Files lists the files written so far, in order.
func (w *Writer) Files() []string {
	w.mu.Lock()
	defer w.mu.Unlock()
	return append([]string(nil), w.files...)
}
