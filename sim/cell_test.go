package sim

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"gonum.org/v1/gonum/diff/fd"
	"gonum.org/v1/gonum/mat"
)

const demoCellPath = "../testdata/demo/cell.json"

func loadDemoCell(t testing.TB) *Cell {
	t.Helper()
	c, err := LoadCell(demoCellPath, os.ReadFile)
	if err != nil {
		t.Fatalf("demo cell: %v", err)
	}
	return c
}

func TestDemoCellLoads(t *testing.T) {
	c := loadDemoCell(t)
	if got, want := c.NumJoints(), 12; got != want {
		t.Fatalf("NumJoints = %d, want %d", got, want)
	}
	if c.JointNames()[0] != "left.j1" || c.JointNames()[11] != "right.j6" {
		t.Errorf("joint names %v", c.JointNames())
	}
	if c.NumAnchors() != 4 || len(c.Markers) != 10 || len(c.Figure.Nodes) != 20 {
		t.Errorf("anchors %d markers %d nodes %d", c.NumAnchors(), len(c.Markers), len(c.Figure.Nodes))
	}
	// Every source file is kept for the capture: cell, URDF (once, though
	// two arms use it), figure.
	if len(c.Sources) != 3 {
		t.Errorf("sources: %d files, want 3", len(c.Sources))
	}
	for _, l := range c.JointLimits() {
		if !(l.MaxAccel > 0 && l.MaxVelocity > 0 && l.Lower < l.Upper) {
			t.Errorf("joint %s has unusable limits %+v", l.Name, l)
		}
	}
}

// The anchor Jacobian against central differences (gonum diff/fd). The
// tolerance 1e-6 relative is what central differences of smooth
// trigonometric maps reach with a step near the cube root of machine
// epsilon (gonum's default).
func TestAnchorJacobianMatchesFiniteDifferences(t *testing.T) {
	c := loadDemoCell(t)
	ws := c.NewWorkspace(nil)
	rng := rand.New(rand.NewPCG(1, 2))
	nq, na := c.NumJoints(), 3*c.NumAnchors()
	q := make([]float64, nq)
	for trial := 0; trial < 5; trial++ {
		for i := range q {
			q[i] = 0.5 * (2*rng.Float64() - 1)
		}
		got := mat.NewDense(na, nq, nil)
		ws.AnchorJacobianTo(got, q)
		want := mat.NewDense(na, nq, nil)
		fd.Jacobian(want, func(y, x []float64) { ws.AnchorsTo(y, x) }, q, &fd.JacobianSettings{Formula: fd.Central})
		assertMatClose(t, fmt.Sprintf("trial %d ∂a/∂q", trial), got, want, 1e-6)
	}
}

// The cell step's sensitivity to the joint vector, ∂x⁺/∂q⁺ (chain rule
// through the bar-point Jacobians), against central differences of the
// whole step (gonum diff/fd). The step is solved to a tight tolerance, so
// differences of converged solutions are smooth; 1e-5 relative allows for
// the solver tolerance showing through the difference quotient.
func TestCellStepJointSensitivityMatchesFiniteDifferences(t *testing.T) {
	c := loadDemoCell(t)
	model, err := c.NewModel(c.TickS)
	if err != nil {
		t.Fatal(err)
	}
	ws := c.NewWorkspace(model)
	nq, n := c.NumJoints(), model.Dim()
	q := make([]float64, nq)
	c.HomeTo(q)
	anchors := make([]float64, 3*c.NumAnchors())
	ws.AnchorsTo(anchors, q)
	x0 := make([]float64, n)
	if err := model.RestPose(ws.StepWorkspace(), x0, anchors); err != nil {
		t.Fatal(err)
	}
	// A moving state: previous positions displaced a little.
	rng := rand.New(rand.NewPCG(3, 4))
	xPrev := make([]float64, n)
	for i := range xPrev {
		xPrev[i] = x0[i] + 1e-3*(2*rng.Float64()-1)
	}
	q1 := make([]float64, nq)
	for i := range q1 {
		q1[i] = q[i] + 0.02*(2*rng.Float64()-1)
	}
	xNext := make([]float64, n)
	if err := ws.Step(xNext, x0, xPrev, q1); err != nil {
		t.Fatal(err)
	}
	got := mat.NewDense(n, nq, nil)
	ws.JointSensitivityTo(got, q1)

	ws2 := c.NewWorkspace(model)
	want := mat.NewDense(n, nq, nil)
	var stepErr error
	fd.Jacobian(want, func(y, qq []float64) {
		if err := ws2.Step(y, x0, xPrev, qq); err != nil {
			stepErr = err
		}
	}, q1, &fd.JacobianSettings{Formula: fd.Central, Step: 1e-5})
	if stepErr != nil {
		t.Fatal(stepErr)
	}
	assertMatClose(t, "∂x⁺/∂q⁺", got, want, 1e-5)
}

func assertMatClose(t *testing.T, what string, got, want mat.Matrix, rel float64) {
	t.Helper()
	scale := mat.Norm(want, math.Inf(1))
	if scale == 0 {
		scale = 1
	}
	var d mat.Dense
	d.Sub(got, want)
	if e := mat.Norm(&d, math.Inf(1)) / scale; !(e <= rel) {
		t.Errorf("%s: relative error %.3g > %.3g", what, e, rel)
	}
}

func TestCellKinematicsAndStepAllocateNothing(t *testing.T) {
	c := loadDemoCell(t)
	model, err := c.NewModel(c.TickS)
	if err != nil {
		t.Fatal(err)
	}
	ws := c.NewWorkspace(model)
	q := make([]float64, c.NumJoints())
	c.HomeTo(q)
	a := make([]float64, 3*c.NumAnchors())
	ws.AnchorsTo(a, q)
	x := make([]float64, model.Dim())
	if err := model.RestPose(ws.StepWorkspace(), x, a); err != nil {
		t.Fatal(err)
	}
	xn := make([]float64, model.Dim())
	jac := mat.NewDense(3*c.NumAnchors(), c.NumJoints(), nil)
	sens := mat.NewDense(model.Dim(), c.NumJoints(), nil)
	run := func() {
		ws.AnchorsTo(a, q)
		ws.AnchorJacobianTo(jac, q)
		if err := ws.Step(xn, x, x, q); err != nil {
			t.Fatal(err)
		}
		ws.JointSensitivityTo(sens, q)
	}
	run()
	if n := testing.AllocsPerRun(20, run); n != 0 {
		t.Errorf("cell kinematics + step + sensitivity: %v allocations per run, want 0", n)
	}
}

// memFiles is a ReadFileFunc over an in-memory set of files.
type memFiles map[string][]byte

func (m memFiles) read(p string) ([]byte, error) {
	if d, ok := m[filepath.ToSlash(p)]; ok {
		return d, nil
	}
	return nil, fmt.Errorf("open %s: %w", p, os.ErrNotExist)
}

// demoFiles loads the demo cell's files into memory with the cell file
// edited by edit (old → new string replacements, each must apply once).
func demoFiles(t *testing.T, edits ...string) memFiles {
	t.Helper()
	m := memFiles{}
	for _, name := range []string{"cell.json", "arm6.urdf", "jellyfish.figure.json"} {
		data, err := os.ReadFile(filepath.Join("../testdata/demo", name))
		if err != nil {
			t.Fatal(err)
		}
		m["demo/"+name] = data
	}
	s := string(m["demo/cell.json"])
	for i := 0; i+1 < len(edits); i += 2 {
		if strings.Count(s, edits[i]) < 1 {
			t.Fatalf("edit %q does not apply to the demo cell", edits[i])
		}
		s = strings.Replace(s, edits[i], edits[i+1], 1)
	}
	m["demo/cell.json"] = []byte(s)
	return m
}

// One malformed cell per class of mistake: each error must name the file,
// a line and the field, so the user can go straight to it.
func TestCellFileErrors(t *testing.T) {
	cases := []struct {
		name  string
		edits []string
		want  []string // substrings of the message: position and field
	}{
		{"wrong format", []string{`"tautline.cell/1"`, `"tautline.cell/9"`}, []string{"demo/cell.json:2:", "format"}},
		{"unknown field", []string{`"tick_period_s"`, `"tick_period_ms": 10, "tick_period_s"`}, []string{"demo/cell.json:", "tick_period_ms", "unknown field"}},
		{"bad tick", []string{`"tick_period_s": 0.01`, `"tick_period_s": -1`}, []string{"demo/cell.json:5:", "tick_period_s"}},
		{"missing URDF", []string{`"urdf": "arm6.urdf"`, `"urdf": "nope.urdf"`}, []string{"demo/cell.json:", "arms[0].urdf", "nope.urdf"}},
		{"no such tip link", []string{`"tip_link": "flange"`, `"tip_link": "paw"`}, []string{"demo/cell.json:", "arms[0].tip_link", "paw"}},
		{"missing accel limit", []string{`"j3": {"accel_limit_per_s2": 4.0}`, `"j3": {}`}, []string{"demo/cell.json:", "arms[0].joints.j3.accel_limit_per_s2"}},
		{"looser velocity", []string{`"j1": {"accel_limit_per_s2": 3.0}`, `"j1": {"accel_limit_per_s2": 3.0, "velocity_limit_per_s": 9}`}, []string{"demo/cell.json:", "arms[0].joints.j1.velocity_limit_per_s", "looser"}},
		{"looser lower", []string{`"j2": {"accel_limit_per_s2": 3.0}`, `"j2": {"accel_limit_per_s2": 3.0, "lower": -3}`}, []string{"demo/cell.json:", "arms[0].joints.j2.lower", "looser"}},
		{"unknown joint", []string{`"j6": {"accel_limit_per_s2": 8.0}`, `"j6": {"accel_limit_per_s2": 8.0}, "j7": {"accel_limit_per_s2": 1}`}, []string{"demo/cell.json:", "arms[0].joints.j7"}},
		{"home outside limits", []string{`"home": [0, 0, 0, 0, 0, 0]`, `"home": [0, 0, 2, 0, 0, 0]`}, []string{"demo/cell.json:", "arms[0].home[2]", "outside"}},
		{"home wrong length", []string{`"home": [0, 0, 0, 0, 0, 0]`, `"home": [0, 0]`}, []string{"demo/cell.json:", "arms[0].home", "6 movable joints"}},
		{"duplicate arm", []string{`"name": "right"`, `"name": "left"`}, []string{"demo/cell.json:", "arms[1].name", "twice"}},
		{"bar on unknown arm", []string{`"arm": "right"`, `"arm": "middle"`}, []string{"demo/cell.json:", "bars[1].arm", "middle"}},
		{"string to unknown bar point", []string{`"bar_point": "left_bar.front"`, `"bar_point": "left_bar.middle"`}, []string{"demo/cell.json:", "strings[0].bar_point"}},
		{"string to unknown node", []string{`"node": "rim2"`, `"node": "rim9"`}, []string{"demo/cell.json:", "strings[0].node", "rim9"}},
		{"string stiffness", []string{`"stiffness_n_per_m": 3000`, `"stiffness_n_per_m": 0`}, []string{"demo/cell.json:", "strings[0].stiffness_n_per_m"}},
		{"duplicate marker", []string{`"id": "mouth"`, `"id": "crown"`}, []string{"demo/cell.json:", "markers[1].id"}},
		{"marker on unknown node", []string{`"node": "oral_2"`, `"node": "oral_7"`}, []string{"demo/cell.json:", "markers[9].node"}},
		{"marker noise", []string{`"marker_noise_m": 0.001`, `"marker_noise_m": 0`}, []string{"demo/cell.json:", "tracker.marker_noise_m"}},
		{"planner negative", []string{`"horizon_step_s": 0.025`, `"horizon_step_s": -0.025`}, []string{"demo/cell.json:", "planner.horizon_step_s"}},
		{"missing figure", []string{`"figure": "jellyfish.figure.json"`, `"figure": "gone.json"`}, []string{"demo/cell.json:", "figure", "gone.json"}},
		{"type mismatch", []string{`"tick_period_s": 0.01`, `"tick_period_s": "fast"`}, []string{"demo/cell.json:5:", "tick_period_s"}},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			files := demoFiles(t, tc.edits...)
			_, err := LoadCell("demo/cell.json", files.read)
			if err == nil {
				t.Fatal("loaded a malformed cell without error")
			}
			for _, w := range tc.want {
				if !strings.Contains(err.Error(), w) {
					t.Errorf("error %q does not mention %q", err, w)
				}
			}
			var fe *FileError
			if !errors.As(err, &fe) || fe.Line == 0 {
				t.Errorf("error carries no FileError with a line: %v", err)
			}
		})
	}
}

// Errors inside a file the cell names are reported against that file.
func TestCellReportsErrorsInNamedFiles(t *testing.T) {
	files := demoFiles(t)
	files["demo/jellyfish.figure.json"] = []byte(strings.Replace(string(files["demo/jellyfish.figure.json"]), `"mass_kg": 0.15`, `"mass_kg": -0.15`, 1))
	_, err := LoadCell("demo/cell.json", files.read)
	if err == nil || !strings.Contains(err.Error(), "demo/jellyfish.figure.json:7:") || !strings.Contains(err.Error(), "mass_kg") {
		t.Errorf("want an error at the figure file's mass_kg on line 7, got %v", err)
	}
	files = demoFiles(t)
	files["demo/arm6.urdf"] = []byte(strings.Replace(string(files["demo/arm6.urdf"]), `type="revolute"`, `type="floating"`, 1))
	_, err = LoadCell("demo/cell.json", files.read)
	if err == nil || !strings.Contains(err.Error(), "demo/arm6.urdf:") || !strings.Contains(err.Error(), "floating") {
		t.Errorf("want an error in the URDF naming the floating joint, got %v", err)
	}
}

func TestInlineFigureErrorsPointIntoTheCellFile(t *testing.T) {
	files := demoFiles(t, `"figure": "jellyfish.figure.json"`,
		`"figure": {"nodes": [{"name": "a", "mass_kg": 1, "position_m": [0, 0, 1]}, {"name": "b", "mass_kg": 0, "position_m": [0, 0, 0.5]}], "rods": [{"nodes": ["a", "b"], "rest_length_m": "initial", "stiffness_n_per_m": 100}]}`)
	_, err := LoadCell("demo/cell.json", files.read)
	if err == nil || !strings.Contains(err.Error(), "demo/cell.json:") || !strings.Contains(err.Error(), "figure.nodes[1].mass_kg") {
		t.Errorf("want an error at figure.nodes[1].mass_kg in the cell file, got %v", err)
	}
}
