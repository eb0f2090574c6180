package capture

import (
	"flag"
	"fmt"
	"os"
	"path/filepath"
	"testing"
)

var writeSeeds = flag.Bool("write-seeds", false, "rewrite testdata/fuzz/FuzzCaptureReader seeds")

// TestWriteFuzzSeeds regenerates the fuzz seeds with -write-seeds; without
// it, it checks each named seed is present (the fuzz target runs them).
func TestWriteFuzzSeeds(t *testing.T) {
	clean := smallCapture(t, 4)
	offs := frameOffsets(t, clean)
	flipped := append([]byte(nil), clean...)
	flipped[offs[2]+2] ^= 0x10
	seeds := map[string][]byte{
		"clean":            clean,
		"torn-in-record":   clean[:offs[3]+3],
		"torn-in-header":   clean[:7],
		"torn-in-length":   append(append([]byte(nil), clean...), 0x85),
		"flipped-middle":   flipped,
		"zero-fill":        append(append([]byte(nil), clean...), make([]byte, 64)...),
		"huge-length":      append(append([]byte(nil), clean...), 0xff, 0xff, 0xff, 0xff, 0x0f, 0x12),
		"not-a-capture":    []byte("time_s,left.j1\n0,0\n"),
		"header-only":      clean[:HeaderSize],
		"future-version":   []byte("tautline.capture/7\n"),
		"every-kind-clean": mustRead(t, writeCapture(t, everyKind())),
	}
	dir := filepath.Join("testdata", "fuzz", "FuzzCaptureReader")
	for name, data := range seeds {
		path := filepath.Join(dir, name)
		if *writeSeeds {
			if err := os.MkdirAll(dir, 0o755); err != nil {
				t.Fatal(err)
			}
			if err := os.WriteFile(path, []byte(fmt.Sprintf("go test fuzz v1\n[]byte(%q)\n", data)), 0o644); err != nil {
				t.Fatal(err)
			}
			continue
		}
		if _, err := os.Stat(path); err != nil {
			t.Errorf("fuzz seed %s is missing; run go test -run TestWriteFuzzSeeds -write-seeds ./proto/capture", path)
		}
	}
}
