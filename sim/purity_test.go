package sim

import (
	"go/parser"
	"go/token"
	"io/fs"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

// forbiddenInCore lists import paths the pure core (sim, mpc) must not use:
// they bring I/O, clocks, logging or networking into code that must stay
// deterministic (DESIGN §3).
var forbiddenInCore = []string{"net", "os", "time", "log", "google.golang.org/grpc", "go.uber.org/zap"}

func forbidden(path string) bool {
	for _, f := range forbiddenInCore {
		if path == f || strings.HasPrefix(path, f+"/") {
			return true
		}
	}
	return false
}

func TestCoreImportsNoIO(t *testing.T) {
	for _, dir := range []string{".", "../mpc"} {
		err := filepath.WalkDir(dir, func(p string, d fs.DirEntry, err error) error {
			if err != nil {
				return err
			}
			if d.IsDir() || !strings.HasSuffix(p, ".go") || strings.HasSuffix(p, "_test.go") {
				return nil
			}
			f, err := parser.ParseFile(token.NewFileSet(), p, nil, parser.ImportsOnly)
			if err != nil {
				return err
			}
			for _, imp := range f.Imports {
				path, _ := strconv.Unquote(imp.Path.Value)
				if forbidden(path) {
					t.Errorf("%s imports %q: the pure core may not do I/O, keep clocks or log", p, path)
				}
			}
			return nil
		})
		if err != nil {
			t.Fatal(err)
		}
	}
}

func TestForbiddenMatcher(t *testing.T) {
	// The checker must itself be able to fail: these must be caught.
	for _, p := range []string{"os", "os/exec", "net/http", "time", "log/slog", "google.golang.org/grpc/codes", "go.uber.org/zap"} {
		if !forbidden(p) {
			t.Errorf("forbidden(%q) = false, want true", p)
		}
	}
	for _, p := range []string{"math", "gonum.org/v1/gonum/mat", "network", "osc", "timex"} {
		if forbidden(p) {
			t.Errorf("forbidden(%q) = true, want false", p)
		}
	}
}
