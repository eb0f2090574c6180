// Package capture writes and reads tautline capture files: the crash-safe
// recording of one session that a studio replays to rehearse, debug and fit
// the model.
//
// # Format
//
// A capture file is the header line "tautline.capture/1\n" (the number is
// the format version) followed by records. Each record is framed as
//
//	[uvarint length][tautline.v1.Record, length bytes][CRC32C of the Record, 4 bytes little endian]
//
// with CRC32C the Castagnoli polynomial. A Record is at least 2 and at most
// MaxRecordBytes bytes long and always has its kind set, so a run of zero
// bytes (what a crashed file system may leave) never reads as records. The
// first record is a SessionStart that embeds the cell, figure, URDF and cue
// files, so a capture replays on its own.
//
// # Writing
//
// A Writer appends through a buffer. It moves the buffer to the file and
// fsyncs it every Settings.FlushInterval (a goroutine owned by the Writer,
// stopped by Close; Settings.SyncTicks injects the clock in tests), after a
// SessionEnd, whenever the caller calls Sync, and on Close. Records
// written before a Sync returned nil survive a crash of the process or the
// machine. An fsync or write error is fatal to the recording: the Writer
// stops, and every later Write, Sync and Close returns that error (it is
// never retried silently, since after a failed fsync the kernel may have
// dropped the dirty pages). With Settings.MaxFileBytes set, the capture is
// split into parts named by PartPath, each opening with the session's
// SessionStart (its part number set), so each part replays on its own.
//
// # Reading
//
// A Reader returns records in order. A capture whose tail was torn (a crash
// mid-append) or corrupted reads as every whole record before the damage,
// then io.EOF; Reader.Damage says where the damage starts, how many bytes
// were dropped and why. Damage followed by a valid record is not a tail: it
// is reported as a *CorruptError naming the offset, because silently skipping
// records in the middle of a session would make a replay lie. (To tell the
// two apart, the Reader looks for a valid frame within one maximal record
// after the damage.) Every length is checked against the bytes that remain
// before anything is allocated.
// Repair rewrites a damaged capture as its longest valid prefix and keeps
// the original aside.
//
// capture imports the generated tautline.v1 package only; the server and the
// client both import capture.
package capture
