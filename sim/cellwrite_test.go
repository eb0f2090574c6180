package sim

import (
	"bytes"
	"encoding/json"
	"os"
	"path/filepath"
	"reflect"
	"testing"
)

// A cell written by MarshalCell into another directory loads (through the
// ordinary loader, reading the disk) with the same values: changed figure,
// strings and tracker translation as written, arms, markers, planner and
// joint limits as in the original, the URDF found through the rewritten
// relative path.
func TestMarshalCellRoundTrip(t *testing.T) {
	cell := loadDemoCell(t)
	params, err := ParseFitParams(cell, "string_rest_lengths,string_stiffnesses,node_masses,damping,tracker_offset")
	if err != nil {
		t.Fatal(err)
	}
	theta := make([]float64, len(params))
	FitValues(theta, cell, params)
	for j := range theta {
		theta[j] *= 1 + 0.01*float64(j+1)/3 // invented new values, not round numbers
		if params[j].Kind == FitTrackerOffset {
			theta[j] += 0.0123 * float64(params[j].Index+1)
		}
	}
	fitted := WithFitValues(cell, params, theta)
	dir := t.TempDir()
	newPath := filepath.Join(dir, "fitted", "cell.json")
	abs, err := filepath.Abs(demoCellPath)
	if err != nil {
		t.Fatal(err)
	}
	fitted.Sources = append([]SourceFile{{Path: abs, Data: cell.Sources[0].Data}}, cell.Sources[1:]...)
	data, err := MarshalCell(fitted, newPath, "fitted in a test")
	if err != nil {
		t.Fatal(err)
	}
	if bytes.Contains(data, []byte("null")) || filepath.IsAbs(firstURDF(t, data)) {
		t.Errorf("written cell has a null or an absolute URDF path:\n%s", data)
	}
	if err := os.MkdirAll(filepath.Dir(newPath), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(newPath, data, 0o644); err != nil {
		t.Fatal(err)
	}
	back, err := LoadCell(newPath, os.ReadFile)
	if err != nil {
		t.Fatalf("%v\n%s", err, data)
	}
	if !reflect.DeepEqual(back.Figure, fitted.Figure) {
		t.Errorf("figure differs after the round trip")
	}
	if !reflect.DeepEqual(back.Strings, fitted.Strings) {
		t.Errorf("strings %+v, want %+v", back.Strings, fitted.Strings)
	}
	if back.TrackerToWorld != fitted.TrackerToWorld {
		t.Errorf("tracker pose %+v, want %+v", back.TrackerToWorld, fitted.TrackerToWorld)
	}
	if !reflect.DeepEqual(back.Markers, cell.Markers) || back.Planner != cell.Planner || back.TickS != cell.TickS || back.Name != cell.Name || back.MarkerNoiseM != cell.MarkerNoiseM {
		t.Errorf("markers, planner, tick, name or noise changed")
	}
	if !reflect.DeepEqual(back.JointNames(), cell.JointNames()) || !reflect.DeepEqual(back.JointLimits(), cell.JointLimits()) {
		t.Errorf("joints or limits changed")
	}
	for i := range cell.Arms {
		if back.Arms[i].Base != cell.Arms[i].Base || !reflect.DeepEqual(back.Arms[i].Home, cell.Arms[i].Home) {
			t.Errorf("arm %d placement changed", i)
		}
	}
	// The figure moves the same: the fitted cell's rest pose equals the
	// in-memory one's bit for bit (both are the same deterministic code on
	// the same values).
	home := make([]float64, cell.NumJoints())
	cell.HomeTo(home)
	rest := func(c *Cell) []float64 {
		m, err := c.NewModel(c.TickS)
		if err != nil {
			t.Fatal(err)
		}
		ws := c.NewWorkspace(m)
		a := make([]float64, 3*c.NumAnchors())
		ws.AnchorsTo(a, home)
		x := make([]float64, m.Dim())
		if err := m.RestPose(m.NewWorkspace(), x, a); err != nil {
			t.Fatal(err)
		}
		return x
	}
	if !reflect.DeepEqual(rest(back), rest(fitted)) {
		t.Errorf("the loaded fitted cell rests elsewhere than the fitted one")
	}
}

func firstURDF(t *testing.T, data []byte) string {
	var f struct {
		Arms []struct {
			URDF string `json:"urdf"`
		} `json:"arms"`
	}
	if err := json.Unmarshal(data, &f); err != nil || len(f.Arms) == 0 {
		t.Fatalf("written cell: %v", err)
	}
	return f.Arms[0].URDF
}
