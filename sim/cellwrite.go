package sim

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"path"
	"path/filepath"
)

// The JSON written by MarshalCell mirrors cellFile (cellfile.go) field for
// field; the figure is always written inline.
type cellOut struct {
	Format   string          `json:"format"`
	Name     string          `json:"name"`
	Comment  string          `json:"comment,omitempty"`
	Comments []string        `json:"comments,omitempty"`
	TickS    float64         `json:"tick_period_s"`
	Arms     []armOut        `json:"arms"`
	Bars     []barFile       `json:"bars"`
	Figure   figureOut       `json:"figure"`
	Strings  []stringFile    `json:"strings"`
	Markers  []markerFile    `json:"markers"`
	Tracker  trackerFile     `json:"tracker"`
	Planner  PlannerDefaults `json:"planner"`
}

type armOut struct {
	Name     string              `json:"name"`
	URDF     string              `json:"urdf"`
	BaseLink string              `json:"base_link"`
	TipLink  string              `json:"tip_link"`
	BasePose poseFile            `json:"base_pose"`
	Home     []float64           `json:"home,omitempty"`
	Joints   map[string]jointOut `json:"joints"`
}

type jointOut struct {
	AccelLimit    *float64 `json:"accel_limit_per_s2,omitempty"`
	Lower         *float64 `json:"lower,omitempty"`
	Upper         *float64 `json:"upper,omitempty"`
	VelocityLimit *float64 `json:"velocity_limit_per_s,omitempty"`
}

type figureOut struct {
	Format  string    `json:"format"`
	Comment string    `json:"comment,omitempty"`
	Nodes   []nodeOut `json:"nodes"`
	Rods    []rodOut  `json:"rods,omitempty"`
}

type nodeOut struct {
	Name     string     `json:"name"`
	MassKg   float64    `json:"mass_kg"`
	Position [3]float64 `json:"position_m"`
	Drag     float64    `json:"drag_ns_per_m"`
	Anchored bool       `json:"anchored,omitempty"`
}

type rodOut struct {
	Nodes     [2]string `json:"nodes"`
	RestM     float64   `json:"rest_length_m"`
	Stiffness float64   `json:"stiffness_n_per_m"`
	Damping   float64   `json:"damping_ns_per_m"`
}

// MarshalCell writes cell c as a cell file ("tautline.cell/1") to be stored
// at newPath, so that LoadCell(newPath, …) gives back c's values: the
// figure, string rest lengths and stiffnesses and the tracker translation
// come from c; everything else (arms, bars, markers, planner, the tracker's
// rotation, comments) is copied from the cell file c was loaded from
// (c.Sources[0]). The figure is written inline with numeric rest lengths,
// and every URDF path is rewritten relative to newPath's directory (an
// absolute path stays absolute), so the file loads as it is wherever it is
// put. note, if not empty, is appended to the file's comments. The old and
// new paths must both be relative to the same directory or both absolute.
func MarshalCell(c *Cell, newPath, note string) ([]byte, error) {
	if len(c.Sources) == 0 {
		return nil, errors.New("MarshalCell: the cell has no source file (it was not loaded by LoadCell)")
	}
	src := c.Sources[0]
	d, err := newJSONDoc(src.Path, src.Data)
	if err != nil {
		return nil, err
	}
	var cf cellFile
	if err := d.decodeStrict(&cf); err != nil {
		return nil, err
	}
	if len(cf.Strings) != len(c.Strings) {
		return nil, fmt.Errorf("MarshalCell: %s has %d strings, the cell %d", src.Path, len(cf.Strings), len(c.Strings))
	}
	oldDir, newDir := filepath.Dir(src.Path), filepath.Dir(newPath)
	out := cellOut{
		Format: CellFormat, Name: cf.Name, Comment: cf.Comment, Comments: cf.Comments,
		TickS: cf.TickS, Bars: cf.Bars, Markers: cf.Markers, Planner: cf.Planner, Tracker: cf.Tracker,
	}
	if note != "" {
		out.Comments = append(append([]string(nil), out.Comments...), note)
	}
	for _, af := range cf.Arms {
		if !filepath.IsAbs(af.URDF) {
			full := filepath.Join(oldDir, filepath.FromSlash(path.Clean(af.URDF)))
			rel, err := filepath.Rel(newDir, full)
			if err != nil {
				return nil, fmt.Errorf("MarshalCell: the URDF %q of arm %q cannot be named relative to %s: %v", af.URDF, af.Name, newDir, err)
			}
			af.URDF = filepath.ToSlash(rel)
		}
		ao := armOut{Name: af.Name, URDF: af.URDF, BaseLink: af.BaseLink, TipLink: af.TipLink, BasePose: af.BasePose, Home: af.Home, Joints: map[string]jointOut{}}
		for name, j := range af.Joints {
			ao.Joints[name] = jointOut(j)
		}
		out.Arms = append(out.Arms, ao)
	}
	fig := c.Figure
	out.Figure = figureOut{Format: FigureFormat, Comment: "written by MarshalCell from " + filepath.ToSlash(src.Path)}
	for _, n := range fig.Nodes {
		out.Figure.Nodes = append(out.Figure.Nodes, nodeOut{Name: n.Name, MassKg: n.MassKg, Position: n.PositionM, Drag: n.DragNsPerM, Anchored: n.Anchored})
	}
	for _, r := range fig.Rods {
		out.Figure.Rods = append(out.Figure.Rods, rodOut{
			Nodes: [2]string{fig.Nodes[r.A].Name, fig.Nodes[r.B].Name},
			RestM: r.RestLengthM, Stiffness: r.StiffnessNPerM, Damping: r.DampingNsPerM,
		})
	}
	for i, sf := range cf.Strings {
		sf.RestM = c.Strings[i].RestLengthM
		sf.Stiffness = c.Strings[i].StiffnessNPerM
		sf.Node = fig.Nodes[c.Strings[i].Node].Name
		out.Strings = append(out.Strings, sf)
	}
	out.Tracker.ToWorld.XYZ = c.TrackerToWorld.P
	var buf bytes.Buffer
	enc := json.NewEncoder(&buf)
	enc.SetIndent("", "  ")
	enc.SetEscapeHTML(false)
	if err := enc.Encode(out); err != nil {
		return nil, fmt.Errorf("MarshalCell: %w", err)
	}
	return buf.Bytes(), nil
}
