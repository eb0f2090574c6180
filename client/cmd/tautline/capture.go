package main

import (
	"errors"
	"fmt"
	"io"
	"strings"
	"time"

	"tautline/proto/capture"
	tautlinev1 "tautline/proto/tautline/v1"
)

func init() {
	register(&command{
		name:    "capture",
		summary: "inspect (info) or repair capture files",
		run:     runCapture,
	})
}

const captureUsage = `usage: tautline capture info FILE
       tautline capture repair [-cut-at-corruption] FILE

info prints a capture's session, cell, cue, duration, records by kind and
any damage; for a capture split into parts (FILE-0001, ...) it prints each
part. It exits 0 when the capture reads to its end or to a torn tail
(reported), 1 when damage is followed by valid records or the file is not a
capture.

repair rewrites a capture with a torn or corrupt tail as its longest valid
prefix and keeps the original as FILE` + capture.DamagedSuffix + `.
`

func runCapture(args []string, stdout, stderr io.Writer) error {
	if len(args) == 0 {
		fmt.Fprint(stderr, captureUsage)
		return fmt.Errorf("%w: name an action: info or repair", errUsage)
	}
	switch args[0] {
	case "info":
		return runCaptureInfo(args[1:], stdout, stderr)
	case "repair":
		return runCaptureRepair(args[1:], stdout, stderr)
	case "-h", "-help", "--help", "help":
		fmt.Fprint(stdout, captureUsage)
		return nil
	}
	fmt.Fprint(stderr, captureUsage)
	return fmt.Errorf("%w: unknown action %q (want info or repair)", errUsage, args[0])
}

func oneFile(fs interface{ Args() []string }) (string, error) {
	if len(fs.Args()) != 1 {
		return "", fmt.Errorf("%w: want one capture FILE, got %d arguments", errUsage, len(fs.Args()))
	}
	return fs.Args()[0], nil
}

func runCaptureInfo(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("capture info", "FILE", "Print a capture's session, cell, cue, duration, records by kind and any damage.", stderr)
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	path, err := oneFile(fs)
	if err != nil {
		return err
	}
	// A capture split into parts is named by its base path.
	parts, err := capture.Parts(path)
	if err != nil {
		return err
	}
	var corrupt error
	for i, part := range parts {
		s, err := capture.Summarize(part)
		if err != nil {
			return err
		}
		if i > 0 {
			fmt.Fprintln(stdout)
		}
		printSummary(stdout, s)
		if s.Corrupt != nil && corrupt == nil {
			corrupt = s.Corrupt
		}
	}
	return corrupt
}

func printSummary(w io.Writer, s *capture.Summary) {
	line := func(key, format string, args ...any) {
		fmt.Fprintf(w, "%-9s %s\n", key, fmt.Sprintf(format, args...))
	}
	version := "header torn"
	if s.Version > 0 {
		version = fmt.Sprintf("format version %d", s.Version)
	}
	line("file", "%s (%s, %d bytes)", s.Path, version, s.Size)
	if st := s.Start; st != nil {
		line("session", "%s (part %d)", orNone(st.GetSessionId()), st.GetPart())
		line("cell", "%s", orNone(st.GetCellName()))
		line("cue", "%s", orNone(st.GetCueName()))
		line("recorder", "%s", orNone(st.GetRecorder()))
		line("started", "%s", time.Unix(0, st.GetStartUnixNs()).UTC().Format(time.RFC3339Nano))
	} else {
		line("session", "none: no session_start record was read")
	}
	switch {
	case s.Start != nil && s.End != nil:
		line("duration", "%.3f s (session end minus start, wall clock)", float64(s.End.GetEndUnixNs()-s.Start.GetStartUnixNs())/1e9)
	default:
		line("duration", "%.3f s (to the last record read, recorder clock)", float64(s.LastSinceStartNs)/1e9)
	}
	if n := s.Counts["observation"]; n > 0 {
		line("cue time", "%.3f s to %.3f s over %d observations", s.FirstCueTimeS, s.LastCueTimeS, n)
	}
	counts := make([]string, len(capture.Kinds))
	for i, k := range capture.Kinds {
		counts[i] = fmt.Sprintf("%s %d", k, s.Counts[k])
	}
	line("records", "%d: %s", s.Records, strings.Join(counts, ", "))
	for i, f := range s.Files {
		key := ""
		if i == 0 {
			key = "files"
		}
		digest := "sha256 ok"
		if !f.DigestOK {
			digest = "SHA-256 MISMATCH: the embedded file is not what was recorded"
		}
		line(key, "%s %s (%d bytes, %s)", roleName(f.Role), f.Name, f.Bytes, digest)
	}
	switch {
	case s.End != nil:
		line("end", "%s (%d ticks)", orNone(s.End.GetReason()), s.End.GetTicks())
	case s.Continued:
		line("end", "continued in the next part")
	default:
		line("end", "no session_end in this file (torn, still recording, or the daemon stopped hard)")
	}
	switch {
	case s.Corrupt != nil:
		line("damage", "corrupt record at byte offset %d: %s; valid records follow at byte offset %d and were not read",
			s.Corrupt.Offset, s.Corrupt.Reason, s.Corrupt.NextValidOffset)
	case s.Damage != nil:
		line("damage", "torn tail: %s", s.Damage)
		line("", "'tautline capture repair %s' keeps the valid prefix", s.Path)
	default:
		line("damage", "none")
	}
}

func roleName(r tautlinev1.EmbeddedFileRole) string {
	return strings.ToLower(strings.TrimPrefix(r.String(), "EMBEDDED_FILE_ROLE_"))
}

func orNone(s string) string {
	if s == "" {
		return "(none)"
	}
	return s
}

func runCaptureRepair(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("capture repair", "[-cut-at-corruption] FILE", `
Rewrite a capture with a torn or corrupt tail as its longest valid prefix.
The original is kept as FILE`+capture.DamagedSuffix+`. A capture whose damage
is followed by valid records is refused unless -cut-at-corruption is given.`, stderr)
	var s capture.RepairSettings
	fs.BoolVar(&s.CutAtCorruption, "cut-at-corruption", false, "also cut at damage that valid records follow, dropping them from the repaired file")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	path, err := oneFile(fs)
	if err != nil {
		return err
	}
	rep, err := capture.Repair(path, s)
	var corrupt *capture.CorruptError
	if errors.As(err, &corrupt) {
		return fmt.Errorf("%w (add -cut-at-corruption to cut there)", err)
	}
	if err != nil {
		return err
	}
	if rep.Damage == nil {
		fmt.Fprintf(stdout, "%s: no damage, %d records; nothing to do\n", path, rep.Records)
		return nil
	}
	fmt.Fprintf(stdout, "%s: repaired: %d records, %d bytes kept; %s\n", path, rep.Records, rep.BytesKept, rep.Damage)
	fmt.Fprintf(stdout, "original kept as %s\n", rep.KeptAs)
	return nil
}
