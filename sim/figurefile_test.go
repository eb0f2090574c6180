package sim

import (
	"errors"
	"math"
	"os"
	"strings"
	"testing"
)

func TestParseFigureFiles(t *testing.T) {
	data, err := os.ReadFile("testdata/figures/puppet.json")
	if err != nil {
		t.Fatal(err)
	}
	fig, err := ParseFigure("puppet.json", data)
	if err != nil {
		t.Fatalf("valid figure refused: %v", err)
	}
	if len(fig.Nodes) != 8 || len(fig.Rods) != 9 {
		t.Fatalf("got %d nodes and %d rods, want 8 and 9", len(fig.Nodes), len(fig.Rods))
	}
	if i := fig.NodeIndex("hips"); i != 5 || fig.Nodes[i].MassKg != 0.05 || fig.Nodes[i].PositionM != [3]float64{0, 0, 1.02} {
		t.Errorf("hips: index %d, node %+v", i, fig.Nodes[i])
	}
	if fig.NodeIndex("tail") != -1 {
		t.Error("NodeIndex of an absent name is not -1")
	}
	// "initial": the distance between head (0,0,1.3) and l_shoulder (-0.06,0,1.2).
	if want := math.Hypot(0.06, 0.1); math.Abs(fig.Rods[0].RestLengthM-want) > 1e-15 {
		t.Errorf("initial rest length %v, want %v", fig.Rods[0].RestLengthM, want)
	}
	if fig.Rods[5].RestLengthM != 0.16 || fig.Rods[8].DampingNsPerM != 0 || fig.Rods[0].DampingNsPerM != 0.05 {
		t.Errorf("rod fields not read: %+v %+v", fig.Rods[5], fig.Rods[8])
	}
	if err := fig.Validate(); err != nil {
		t.Errorf("parsed figure does not validate: %v", err)
	}
	c := fig.Clone()
	c.Nodes[0].MassKg = 9
	c.Rods[0].A = 7
	if fig.Nodes[0].MassKg == 9 || fig.Rods[0].A == 7 {
		t.Error("Clone shares storage with the original")
	}

	data, err = os.ReadFile("testdata/figures/pendulum.json")
	if err != nil {
		t.Fatal(err)
	}
	fig, err = ParseFigure("pendulum.json", data)
	if err != nil {
		t.Fatal(err)
	}
	if !fig.Nodes[0].Anchored || fig.Nodes[1].Anchored || fig.Rods[0].StiffnessNPerM != 1e5 {
		t.Errorf("pendulum read wrong: %+v", fig)
	}
}

// figureWith is a valid two-node figure with one line replaced, so each
// malformed case differs from a good file in one place. Line numbers:
//
//	1 {
//	2 "format": ...
//	3 "nodes": [
//	4   node a
//	5   node b
//	6 ],
//	7 "rods": [
//	8   rod a-b
//	9 ]
//	10 }
var goodFigureLines = []string{
	`{`,
	`  "format": "tautline.figure/1",`,
	`  "nodes": [`,
	`    {"name": "a", "mass_kg": 1, "position_m": [0, 0, 1], "anchored": true},`,
	`    {"name": "b", "mass_kg": 0.5, "position_m": [0, 0, 0], "drag_ns_per_m": 0.1}`,
	`  ],`,
	`  "rods": [`,
	`    {"nodes": ["a", "b"], "rest_length_m": "initial", "stiffness_n_per_m": 100, "damping_ns_per_m": 0.2}`,
	`  ]`,
	`}`,
}

func figureWith(line int, text string) []byte {
	lines := append([]string(nil), goodFigureLines...)
	lines[line-1] = text
	return []byte(strings.Join(lines, "\n"))
}

func TestParseFigureGoodBase(t *testing.T) {
	fig, err := ParseFigure("base.json", figureWith(1, "{"))
	if err != nil {
		t.Fatalf("the base of the malformed cases must itself be valid: %v", err)
	}
	if fig.Rods[0].RestLengthM != 1 || fig.Nodes[1].DragNsPerM != 0.1 || fig.Rods[0].DampingNsPerM != 0.2 {
		t.Errorf("base figure read wrong: %+v", fig)
	}
}

func TestParseFigureMalformed(t *testing.T) {
	cases := []struct {
		name  string
		line  int    // line replaced
		text  string // its new text
		want  string // "file:line:col: field" prefix expected in one of the errors
		words string // and a word of the message
	}{
		{"wrong format", 2, `  "format": "tautline.figure/9",`, `bad.json:2:13: format:`, "tautline.figure/1"},
		{"unknown field", 5, `    {"name": "b", "mass_kg": 0.5, "position_m": [0, 0, 0], "colour": "red"}`, `bad.json:5:70: nodes[1].colour:`, "unknown field"},
		{"duplicate node name", 5, `    {"name": "a", "mass_kg": 0.5, "position_m": [0, 0, 0]}`, `bad.json:5:14: nodes[1].name:`, "duplicate"},
		{"unknown node in a rod", 8, `    {"nodes": ["a", "c"], "rest_length_m": 1, "stiffness_n_per_m": 100}`, `bad.json:8:21: rods[0].nodes[1]:`, `unknown node "c"`},
		{"zero mass", 5, `    {"name": "b", "mass_kg": 0, "position_m": [0, 0, 0]}`, `bad.json:5:30: nodes[1].mass_kg:`, "positive"},
		{"negative mass", 5, `    {"name": "b", "mass_kg": -2, "position_m": [0, 0, 0]}`, `bad.json:5:30: nodes[1].mass_kg:`, "positive"},
		{"zero stiffness", 8, `    {"nodes": ["a", "b"], "rest_length_m": 1, "stiffness_n_per_m": 0}`, `bad.json:8:68: rods[0].stiffness_n_per_m:`, "positive"},
		{"negative rest length", 8, `    {"nodes": ["a", "b"], "rest_length_m": -1, "stiffness_n_per_m": 5}`, `bad.json:8:44: rods[0].rest_length_m:`, "positive"},
		{"overflow to Inf", 5, `    {"name": "b", "mass_kg": 1e999, "position_m": [0, 0, 0]}`, `bad.json:5:30: nodes[1].mass_kg:`, "not a finite number"},
		{"overflow in a position", 5, `    {"name": "b", "mass_kg": 1, "position_m": [0, -1e400, 0]}`, `bad.json:5:51: nodes[1].position_m[1]:`, "not a finite number"},
		{"rod from a node to itself", 8, `    {"nodes": ["b", "b"], "rest_length_m": 1, "stiffness_n_per_m": 100}`, `bad.json:8:15: rods[0].nodes:`, "itself"},
		{"node joined to nothing", 9, `  , {"nodes": ["a", "b"], "rest_length_m": 2, "stiffness_n_per_m": 1}], "comment": "x"`, `bad.json:5:14: nodes[1].name:`, "joined to nothing"},
		{"missing mass", 5, `    {"name": "b", "position_m": [0, 0, 0]}`, `bad.json:5:5: nodes[1].mass_kg:`, "missing"},
		{"text where a number goes", 5, `    {"name": "b", "mass_kg": "heavy", "position_m": [0, 0, 0]}`, `bad.json:5:30: nodes[1].mass_kg:`, "number"},
		{"short position", 5, `    {"name": "b", "mass_kg": 1, "position_m": [0, 0]}`, `bad.json:5:47: nodes[1].position_m:`, "three numbers"},
		{"initial length of coincident nodes", 5, `    {"name": "b", "mass_kg": 1, "position_m": [0, 0, 1]}`, `bad.json:8:44: rods[0].rest_length_m:`, "same position"},
		{"negative drag", 5, `    {"name": "b", "mass_kg": 1, "position_m": [0, 0, 0], "drag_ns_per_m": -1}`, `bad.json:5:75: nodes[1].drag_ns_per_m:`, "negative"},
		{"syntax error", 6, `  ]`, `bad.json:7:`, "syntax"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			data := figureWith(c.line, c.text)
			if c.name == "node joined to nothing" {
				// Remove the only rod instead: keep a valid JSON shape.
				data = []byte(strings.Replace(string(figureWith(8, `    `)), `"rods": [`+"\n    \n  ]", `"rods": []`, 1))
			}
			fig, err := ParseFigure("bad.json", data)
			if err == nil {
				t.Fatalf("accepted:\n%s\n%+v", data, fig)
			}
			var fe FileErrors
			if !errors.As(err, &fe) || len(fe) == 0 {
				t.Fatalf("error is not FileErrors: %T %v", err, err)
			}
			for _, e := range fe {
				if strings.HasPrefix(e.Error(), c.want) && strings.Contains(e.Msg, c.words) {
					return
				}
			}
			t.Errorf("no error starts %q and mentions %q; got:\n%v\ninput:\n%s", c.want, c.words, err, data)
		})
	}
}

// Every problem in a file is reported, not just the first, in file order.
func TestParseFigureReportsEveryProblem(t *testing.T) {
	data := []byte(`{
  "format": "tautline.figure/1",
  "nodes": [
    {"name": "a", "mass_kg": -1, "position_m": [0, 0, 1]},
    {"name": "a", "mass_kg": 1, "position_m": [0, 0, 0], "size": 3}
  ],
  "rods": [
    {"nodes": ["a", "z"], "rest_length_m": 1, "stiffness_n_per_m": -4}
  ]
}`)
	_, err := ParseFigure("many.json", data)
	var fe FileErrors
	if !errors.As(err, &fe) {
		t.Fatalf("got %v", err)
	}
	want := []string{
		"many.json:4:30: nodes[0].mass_kg:",
		"many.json:5:14: nodes[1].name:",
		"many.json:5:66: nodes[1].size:",
		"many.json:8:21: rods[0].nodes[1]:",
		"many.json:8:68: rods[0].stiffness_n_per_m:",
	}
	if len(fe) != len(want) {
		t.Fatalf("got %d errors, want %d:\n%v", len(fe), len(want), err)
	}
	for i, w := range want {
		if !strings.HasPrefix(fe[i].Error(), w) {
			t.Errorf("error %d = %q, want prefix %q", i, fe[i].Error(), w)
		}
	}
}

// An inline figure inside another document reports paths under its prefix.
func TestParseFigureInline(t *testing.T) {
	data := []byte(`{"cell": "x",
 "figure": {
  "nodes": [{"name": "a", "mass_kg": 1, "position_m": [0, 0, 1]},
            {"name": "b", "mass_kg": 0, "position_m": [0, 0, 0]}],
  "rods": [{"nodes": ["a", "b"], "rest_length_m": "initial", "stiffness_n_per_m": 10}]}}`)
	d, err := newJSONDoc("cell.json", data)
	if err != nil {
		t.Fatal(err)
	}
	_, errs := parseFigureIn(d, "figure")
	if len(errs) != 1 || !strings.HasPrefix(errs[0].Error(), "cell.json:4:38: figure.nodes[1].mass_kg:") {
		t.Fatalf("got %v", errs)
	}
	good := strings.Replace(string(data), `"mass_kg": 0`, `"mass_kg": 2`, 1)
	d, _ = newJSONDoc("cell.json", []byte(good))
	fig, errs := parseFigureIn(d, "figure")
	if len(errs) != 0 || fig.Nodes[1].MassKg != 2 || fig.Rods[0].RestLengthM != 1 {
		t.Fatalf("inline figure: %v %+v", errs, fig)
	}
	if _, errs := parseFigureIn(d, "puppet"); len(errs) != 1 || !strings.Contains(errs[0].Error(), "puppet") {
		t.Errorf("missing inline figure: %v", errs)
	}
}

// ParseFigure must never panic, whatever the bytes; anything it accepts
// must validate. Seeds: the test figures and the malformed base.
func FuzzParseFigure(f *testing.F) {
	for _, name := range []string{"testdata/figures/puppet.json", "testdata/figures/pendulum.json"} {
		data, err := os.ReadFile(name)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(data)
	}
	f.Add(figureWith(1, "{"))
	f.Add([]byte(`{"format": "tautline.figure/1", "nodes": [{"name": "a", "mass_kg": 1e-300, "position_m": [0, 0, 0]}]}`))
	f.Fuzz(func(t *testing.T, data []byte) {
		fig, err := ParseFigure("fuzz.json", data)
		if err != nil {
			var fe FileErrors
			if !errors.As(err, &fe) || len(fe) == 0 {
				t.Fatalf("error is not a non-empty FileErrors: %T", err)
			}
			return
		}
		if err := fig.Validate(); err != nil {
			t.Fatalf("accepted a figure that does not validate: %v", err)
		}
	})
}
