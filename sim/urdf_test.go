package sim

import (
	"bytes"
	"errors"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

// readTestFile reads a file for a test, failing the test if it cannot.
func readTestFile(t testing.TB, path string) []byte {
	t.Helper()
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	return data
}

// loadTestChain parses a URDF file and extracts a chain, failing on error.
func loadTestChain(t testing.TB, path, base, tip string) *Chain {
	t.Helper()
	u, err := ParseURDF(path, readTestFile(t, path))
	if err != nil {
		t.Fatalf("ParseURDF(%s): %v", path, err)
	}
	c, err := u.Chain(base, tip)
	if err != nil {
		t.Fatalf("Chain(%s, %s, %s): %v", path, base, tip, err)
	}
	return c
}

const demoArmPath = "../testdata/demo/arm6.urdf"

func TestParseDemoArm(t *testing.T) {
	u, err := ParseURDF(demoArmPath, readTestFile(t, demoArmPath))
	if err != nil {
		t.Fatal(err)
	}
	if u.Name != "arm6" {
		t.Errorf("robot name %q, want arm6", u.Name)
	}
	// The file has 10 <link> and 9 <joint> elements with a name (the
	// transmission's <joint name="j1"/> reference is not one: it is
	// ignored with the rest of <transmission>, as are visual, collision,
	// inertial and material elements).
	if len(u.Links) != 10 || len(u.Joints) != 9 {
		t.Errorf("read %d links and %d joints, want 10 and 9", len(u.Links), len(u.Joints))
	}
	data := readTestFile(t, demoArmPath)
	if n := bytes.Count(data, []byte("<link name=")); n != len(u.Links) {
		t.Errorf("file has %d <link name=…> tags, parser kept %d links", n, len(u.Links))
	}
	if n := bytes.Count(data, []byte("<joint name=")) - 1; n != len(u.Joints) {
		t.Errorf("file has %d <joint name=…> tags outside <transmission>, parser kept %d joints", n, len(u.Joints))
	}
	for _, j := range u.Joints {
		// The recorded line must hold that joint's start tag.
		line := lineOf(data, j.Line)
		if !strings.Contains(line, `<joint name="`+j.Name+`"`) {
			t.Errorf("joint %s recorded at line %d, which reads %q", j.Name, j.Line, line)
		}
	}
}

// lineOf returns 1-based line n of data.
func lineOf(data []byte, n int) string {
	lines := strings.Split(string(data), "\n")
	if n < 1 || n > len(lines) {
		return ""
	}
	return lines[n-1]
}

// markedLine returns the 1-based line carrying the ERROR marker.
func markedLine(t *testing.T, data []byte) int {
	t.Helper()
	found := 0
	for i, l := range strings.Split(string(data), "\n") {
		if strings.Contains(l, "<!-- ERROR -->") {
			if found != 0 {
				t.Fatalf("two ERROR markers (lines %d and %d)", found, i+1)
			}
			found = i + 1
		}
	}
	if found == 0 {
		t.Fatal("no ERROR marker in the test file")
	}
	return found
}

// TestMalformedURDF checks one file per class of bad input: the reader
// reports exactly one problem, at the marked line, naming the file and the
// element or attribute, and (where it gives a column) the column points at
// that element or attribute in the file.
func TestMalformedURDF(t *testing.T) {
	cases := []struct {
		file  string
		field string // FileError.Field, exactly
		at    string // text that must start at line:column ("" if no column)
		msg   string // a phrase the message must contain
		// chain, if set, marks valid URDF that tautline cannot drive: the
		// file parses, the chain from "base" to "upper" works, and the
		// chain from "base" to this link is refused with the error.
		chain string
	}{
		{"bad_xml.urdf", "", "", "not well-formed XML", ""},
		{"bad_encoding.urdf", "", "<?xml", "save it as UTF-8", ""},
		{"bad_root.urdf", "model", "<model", "root element", ""},
		{"bad_empty.urdf", "", "", "no <robot> element", ""},
		{"bad_mimic.urdf", "joint[j2]/mimic", "<mimic", "mimic joints are not supported", "lower"},
		{"bad_mimic_no_joint.urdf", "joint[j2]/mimic@joint", "<mimic", "needs a non-empty joint", ""},
		{"bad_floating.urdf", "joint[j2]@type", "type=", `"floating" is not supported`, "lower"},
		{"bad_planar.urdf", "joint[j2]@type", "type=", `"planar" is not supported`, "lower"},
		{"bad_type.urdf", "joint[j2]@type", "type=", `unknown joint type "ball"`, ""},
		{"bad_no_type.urdf", "joint[j2]@type", "<joint", "needs a type", ""},
		{"bad_revolute_no_limit.urdf", "joint[j2]/limit", "<joint", "revolute joint needs a <limit", ""},
		{"bad_prismatic_no_limit.urdf", "joint[j1]/limit", "<joint", "prismatic joint needs a <limit", ""},
		{"bad_number.urdf", "joint[j2]/origin@xyz", "xyz=", `"abc"`, ""},
		{"bad_count.urdf", "joint[j2]/origin@rpy", "rpy=", "has 2 values", ""},
		{"bad_nan.urdf", "joint[j2]/limit@upper", "upper=", "not a finite number", ""},
		{"bad_zero_axis.urdf", "joint[j2]/axis@xyz", "xyz=", "axis is zero", ""},
		{"bad_limit_order.urdf", "joint[j2]/limit@lower", "lower=", "not below upper", ""},
		{"bad_velocity.urdf", "joint[j2]/limit@velocity", "<limit", "needs a velocity", ""},
		{"bad_missing_link.urdf", "joint[j2]/child@link", "<child", `no link named "nowhere"`, ""},
		{"bad_two_parents.urdf", "joint[j3]/child@link", "<child", "already has parent joint", ""},
		{"bad_loop.urdf", "joint[j3]/child@link", "<child", "loop", ""},
		{"bad_self_parent.urdf", "joint[j3]/child@link", "<child", "its own parent", ""},
		{"bad_dup_link.urdf", "link[upper]", "<link", "defined twice", ""},
		{"bad_dup_joint.urdf", "joint[j2]", "<joint", "defined twice", ""},
		{"bad_link_no_name.urdf", "link", "<link", "needs a non-empty name", ""},
		{"bad_no_parent.urdf", "joint[j2]/parent", "<joint", "needs a <parent", ""},
		{"bad_no_link_attr.urdf", "joint[j2]/child@link", "<child", "needs a non-empty link", ""},
		{"bad_two_roots.urdf", "link[stray]", "<link", "2 root links", ""},
		{"bad_dup_origin.urdf", "joint[j2]/origin", "<origin", "at most one <origin>", ""},
		{"bad_joint_child_element.urdf", "joint[j2]/axsi", "<axsi", "unknown element <axsi>", ""},
		{"bad_top_element.urdf", "jiont", "<jiont", "unknown element <jiont>", ""},
		{"bad_xacro.urdf", "xacro:include", "<xacro:include", "expand xacro", ""},
	}
	seen := map[string]bool{}
	for _, tc := range cases {
		seen[tc.file] = true
		t.Run(tc.file, func(t *testing.T) {
			path := filepath.Join("testdata", "urdf", tc.file)
			data := readTestFile(t, path)
			wantLine := markedLine(t, data)
			u, err := ParseURDF(path, data)
			if tc.chain != "" {
				if err != nil {
					t.Fatalf("ParseURDF refused valid URDF: %v", err)
				}
				if _, err := u.Chain("base", "upper"); err != nil {
					t.Errorf("the chain that avoids the unsupported joint was refused: %v", err)
				}
				_, err = u.Chain("base", tc.chain)
			}
			if err == nil {
				t.Fatal("a malformed or unsupported file was accepted")
			}
			var errs FileErrors
			if fe, ok := err.(*FileError); ok && tc.chain != "" {
				errs = FileErrors{fe} // Chain returns a single *FileError
			} else if !errors.As(err, &errs) {
				t.Fatalf("error %T is not a FileErrors: %v", err, err)
			}
			if len(errs) != 1 {
				t.Fatalf("got %d problems, want exactly 1:\n%v", len(errs), err)
			}
			fe := errs[0]
			if fe.File != path {
				t.Errorf("File = %q, want %q", fe.File, path)
			}
			if fe.Line != wantLine {
				t.Errorf("Line = %d, want %d (%v)", fe.Line, wantLine, fe)
			}
			if fe.Field != tc.field {
				t.Errorf("Field = %q, want %q", fe.Field, tc.field)
			}
			if !strings.Contains(fe.Msg, tc.msg) {
				t.Errorf("message %q does not contain %q", fe.Msg, tc.msg)
			}
			if tc.at != "" {
				line := lineOf(data, fe.Line)
				if fe.Col < 1 || fe.Col > len(line) || !strings.HasPrefix(line[fe.Col-1:], tc.at) {
					t.Errorf("column %d of line %q does not start with %q", fe.Col, line, tc.at)
				}
			}
			// The printed message carries file, line and field together.
			want := path + ":" + strconv.Itoa(wantLine)
			if s := fe.Error(); !strings.HasPrefix(s, want) || !strings.Contains(s, tc.field) {
				t.Errorf("message %q does not start with %q and name %q", s, want, tc.field)
			}
		})
	}
	// Every malformed test file has a case.
	names, err := filepath.Glob(filepath.Join("testdata", "urdf", "bad_*.urdf"))
	if err != nil {
		t.Fatal(err)
	}
	for _, n := range names {
		if !seen[filepath.Base(n)] {
			t.Errorf("%s has no test case", n)
		}
	}
}

// TestURDFDefaults checks the URDF specification's defaults: origin zero,
// axis (1, 0, 0); axes are normalised; continuous joints have no position
// limits; a limit-less continuous joint has no velocity limit.
func TestURDFDefaults(t *testing.T) {
	const doc = `<robot name="r">
  <link name="a"/><link name="b"/><link name="c"/>
  <joint name="spin" type="continuous"><parent link="a"/><child link="b"/></joint>
  <joint name="lift" type="prismatic"><parent link="b"/><child link="c"/>
    <axis xyz="0 0 -4"/><limit lower="-0.1" upper="0.2" velocity="0.5"/></joint>
</robot>`
	u, err := ParseURDF("inline.urdf", []byte(doc))
	if err != nil {
		t.Fatal(err)
	}
	spin, lift := u.Joints[0], u.Joints[1]
	if spin.Origin != Identity() {
		t.Errorf("default origin %v, want identity", spin.Origin)
	}
	if spin.Axis != [3]float64{1, 0, 0} {
		t.Errorf("default axis %v, want (1, 0, 0)", spin.Axis)
	}
	if spin.Kind != Continuous || !math.IsInf(spin.Lower, -1) || !math.IsInf(spin.Upper, 1) || !math.IsInf(spin.VelocityLimit, 1) {
		t.Errorf("continuous joint without limit: %+v", spin)
	}
	if lift.Axis != [3]float64{0, 0, -1} {
		t.Errorf("axis %v, want (0, 0, -1) after normalising", lift.Axis)
	}
	if lift.Kind != Prismatic || lift.Lower != -0.1 || lift.Upper != 0.2 || lift.VelocityLimit != 0.5 {
		t.Errorf("prismatic joint: %+v", lift)
	}
}

// TestURDFReportsEveryProblem checks that independent problems in one file
// are all reported, in file order.
func TestURDFReportsEveryProblem(t *testing.T) {
	const doc = `<robot name="r">
  <link name="a"/><link name="b"/><link name="c"/>
  <joint name="j1" type="revolute"><parent link="a"/><child link="b"/></joint>
  <joint name="j2" type="ball"><parent link="b"/><child link="c"/></joint>
</robot>`
	_, err := ParseURDF("two.urdf", []byte(doc))
	var errs FileErrors
	if !errors.As(err, &errs) || len(errs) != 2 {
		t.Fatalf("want two problems, got %v", err)
	}
	if errs[0].Line != 3 || errs[1].Line != 4 {
		t.Errorf("problems at lines %d and %d, want 3 and 4", errs[0].Line, errs[1].Line)
	}
}

// FuzzParseURDF: any input either parses into a consistent tree or fails
// with positioned errors; nothing panics. `go test` runs the seeds (every
// test URDF); `go test -fuzz FuzzParseURDF ./sim` explores further.
func FuzzParseURDF(f *testing.F) {
	names, err := filepath.Glob(filepath.Join("testdata", "urdf", "*.urdf"))
	if err != nil {
		f.Fatal(err)
	}
	for _, n := range append(names, demoArmPath) {
		f.Add(readTestFile(f, n))
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		u, err := ParseURDF("fuzz.urdf", data)
		if err != nil {
			var errs FileErrors
			if !errors.As(err, &errs) || len(errs) == 0 {
				t.Fatalf("error %v is not a non-empty FileErrors", err)
			}
			for _, e := range errs {
				if e.File != "fuzz.urdf" || e.Line < 1 || e.Msg == "" {
					t.Fatalf("badly positioned error %#v", e)
				}
			}
			return
		}
		links := map[string]bool{}
		for _, l := range u.Links {
			links[l.Name] = true
		}
		for _, j := range u.Joints {
			if !links[j.Parent] || !links[j.Child] {
				t.Fatalf("joint %s connects unknown links", j.Name)
			}
			if n := math.Sqrt(j.Axis[0]*j.Axis[0] + j.Axis[1]*j.Axis[1] + j.Axis[2]*j.Axis[2]); math.Abs(n-1) > 1e-12 {
				t.Fatalf("joint %s axis %v is not unit", j.Name, j.Axis)
			}
			if (j.Kind == Revolute || j.Kind == Prismatic) && !(j.Lower < j.Upper && j.VelocityLimit > 0) {
				t.Fatalf("joint %s has limits [%v, %v], velocity %v", j.Name, j.Lower, j.Upper, j.VelocityLimit)
			}
		}
		// Every link's chain from the root either works or fails cleanly.
		root := u.Links[0].Name
		for _, l := range u.Links {
			if c, err := u.Chain(root, l.Name); err == nil {
				ws := c.NewWorkspace()
				c.Forward(ws, Identity(), make([]float64, c.NumJoints()))
			}
		}
	})
}
