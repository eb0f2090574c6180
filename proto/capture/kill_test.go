package capture

import (
	"bufio"
	"errors"
	"fmt"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"
)

// killChildEnv, when set in the environment, makes the test binary a
// recording child instead of running tests: it records to the path in the
// variable until it is killed. killChildSplitEnv makes it split parts.
const (
	killChildEnv      = "TAUTLINE_CAPTURE_KILL_CHILD"
	killChildSplitEnv = "TAUTLINE_CAPTURE_KILL_CHILD_SPLIT"
)

func TestMain(m *testing.M) {
	if path := os.Getenv(killChildEnv); path != "" {
		os.Exit(recordUntilKilled(path, os.Getenv(killChildSplitEnv) != ""))
	}
	os.Exit(m.Run())
}

// recordUntilKilled writes observations 0, 1, 2, ... and after every few
// prints "synced N" once a Sync has returned with records up to N on disk.
func recordUntilKilled(path string, split bool) int {
	// A buffer shorter than two records: records reach the file in pieces
	// between syncs, so a kill can tear one.
	s := Settings{FlushInterval: -1, BufferBytes: 40}
	if split {
		s.MaxFileBytes = 1500
	}
	w, err := Create(path, s)
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		return 1
	}
	if err := w.Write(smallStart()); err != nil {
		fmt.Fprintln(os.Stderr, err)
		return 1
	}
	out := bufio.NewWriter(os.Stdout)
	fmt.Fprintln(out, "ready")
	out.Flush()
	for i := 0; ; i++ {
		if err := w.Write(smallRecord(i)); err != nil {
			fmt.Fprintln(os.Stderr, err)
			return 1
		}
		if i%3 == 2 {
			if err := w.Sync(); err != nil {
				fmt.Fprintln(os.Stderr, err)
				return 1
			}
			fmt.Fprintf(out, "synced %d\n", i)
			out.Flush()
		}
	}
}

// TestSIGKILLKeepsSyncedRecords kills a recording child process at random
// moments, at least 100 times, and checks that every record it reported
// synced reads back, in order, with nothing but a torn tail dropped.
func TestSIGKILLKeepsSyncedRecords(t *testing.T) {
	const runs = 100
	bound := 90 * time.Second // time bound for all runs
	rng := rand.New(rand.NewPCG(6, 2))
	start := time.Now()
	dir := t.TempDir()
	var torn, reportedTotal int
	for run := range runs {
		if time.Since(start) > bound {
			t.Fatalf("only %d of %d kills in %v", run, runs, bound)
		}
		split := run%2 == 1
		path := filepath.Join(dir, fmt.Sprintf("kill%03d.tlcap", run))
		cmd := exec.Command(os.Args[0], "-test.run=^$")
		cmd.Env = append(os.Environ(), killChildEnv+"="+path)
		if split {
			cmd.Env = append(cmd.Env, killChildSplitEnv+"=1")
		}
		var stderr strings.Builder
		cmd.Stderr = &stderr
		stdout, err := cmd.StdoutPipe()
		if err != nil {
			t.Fatal(err)
		}
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		lines := make(chan string, 1024)
		go func() {
			sc := bufio.NewScanner(stdout)
			for sc.Scan() {
				lines <- sc.Text()
			}
			close(lines)
		}()
		if first, ok := <-lines; !ok || first != "ready" {
			cmd.Process.Kill()
			cmd.Wait()
			t.Fatalf("run %d: child did not start (%q): %s", run, first, stderr.String())
		}
		time.Sleep(time.Duration(rng.IntN(10_000)) * time.Microsecond)
		if err := cmd.Process.Signal(syscall.SIGKILL); err != nil {
			t.Fatal(err)
		}
		reported := -1
		for l := range lines {
			n, err := strconv.Atoi(strings.TrimPrefix(l, "synced "))
			if err != nil || n <= reported {
				t.Fatalf("run %d: child printed %q after synced %d", run, l, reported)
			}
			reported = n
		}
		err = cmd.Wait()
		var exit *exec.ExitError
		if !errors.As(err, &exit) || exit.Sys().(syscall.WaitStatus).Signal() != syscall.SIGKILL {
			t.Fatalf("run %d: child ended with %v, not by the kill: %s", run, err, stderr.String())
		}
		got, damaged := readParts(t, path, split)
		if got <= reported {
			t.Fatalf("run %d: child reported record %d synced, but only records 0..%d read back", run, reported, got-1)
		}
		if damaged {
			torn++
		}
		reportedTotal += reported + 1
	}
	t.Logf("%d kills in %v; %d records reported synced in all; %d captures had a torn tail", runs, time.Since(start).Round(time.Millisecond), reportedTotal, torn)
}

// readParts reads a killed child's capture (all parts if split) and returns
// how many consecutive observations 0, 1, ... it holds, and whether the end
// was torn. Only the last part may be damaged.
func readParts(t *testing.T, path string, split bool) (int, bool) {
	t.Helper()
	var files []string
	if !split {
		files = []string{path}
	}
	for n := 1; split; n++ {
		if _, err := os.Stat(PartPath(path, n)); err != nil {
			break
		}
		files = append(files, PartPath(path, n))
	}
	next, damaged := 0, false
	for i, f := range files {
		recs, damage, err := ReadFile(f)
		if err != nil {
			t.Fatalf("%s: %v", f, err)
		}
		if damage != nil && i != len(files)-1 {
			t.Fatalf("%s: damage %v in a part that is not the last", f, damage)
		}
		damaged = damage != nil
		for _, rec := range recs {
			obs := rec.GetObservation()
			if obs == nil {
				continue // session start, continuation event
			}
			if obs.GetTickSeq() != uint64(next) {
				t.Fatalf("%s: observation %d where %d was due", f, obs.GetTickSeq(), next)
			}
			next++
		}
	}
	return next, damaged
}
