package sim

import (
	"encoding/json"
	"fmt"
	"math"
	"path"
	"path/filepath"
	"strings"
)

// ReadFileFunc reads a file by path. The cell loader takes one so that sim
// itself does no I/O: pass os.ReadFile, or a map lookup in tests and when
// replaying a capture's embedded files.
type ReadFileFunc func(path string) ([]byte, error)

// cellFile mirrors the JSON of a cell file ("format": "tautline.cell/1").
type cellFile struct {
	Format   string          `json:"format"`
	Name     string          `json:"name"`
	TickS    float64         `json:"tick_period_s"`
	Arms     []armFile       `json:"arms"`
	Bars     []barFile       `json:"bars"`
	Figure   json.RawMessage `json:"figure"`
	Strings  []stringFile    `json:"strings"`
	Markers  []markerFile    `json:"markers"`
	Tracker  trackerFile     `json:"tracker"`
	Planner  PlannerDefaults `json:"planner"`
	Comment  string          `json:"comment"`
	Comments []string        `json:"comments"`
}

type poseFile struct {
	XYZ [3]float64 `json:"xyz_m"`
	RPY [3]float64 `json:"rpy_rad"`
}

type jointFile struct {
	AccelLimit    *float64 `json:"accel_limit_per_s2"`
	Lower         *float64 `json:"lower"`
	Upper         *float64 `json:"upper"`
	VelocityLimit *float64 `json:"velocity_limit_per_s"`
}

type armFile struct {
	Name     string               `json:"name"`
	URDF     string               `json:"urdf"`
	BaseLink string               `json:"base_link"`
	TipLink  string               `json:"tip_link"`
	BasePose poseFile             `json:"base_pose"`
	Home     []float64            `json:"home"`
	Joints   map[string]jointFile `json:"joints"`
}

type barPointFile struct {
	Name      string     `json:"name"`
	PositionM [3]float64 `json:"position_m"`
}

type barFile struct {
	Name   string         `json:"name"`
	Arm    string         `json:"arm"`
	Points []barPointFile `json:"points"`
}

type stringFile struct {
	BarPoint  string  `json:"bar_point"`
	Node      string  `json:"node"`
	RestM     float64 `json:"rest_length_m"`
	Stiffness float64 `json:"stiffness_n_per_m"`
}

type markerFile struct {
	ID   string `json:"id"`
	Node string `json:"node"`
}

type trackerFile struct {
	ToWorld      poseFile `json:"to_world"`
	MarkerNoiseM float64  `json:"marker_noise_m"`
}

// LoadCell reads the cell file at cellPath and every file it names (paths
// in the cell file are relative to it) through read, and validates the
// whole. Every problem found is reported as a FileError naming the file,
// line:column and field; when a file cannot be read or parsed the loader
// stops at that file.
func LoadCell(cellPath string, read ReadFileFunc) (*Cell, error) {
	data, err := read(cellPath)
	if err != nil {
		return nil, fmt.Errorf("reading cell file: %w", err)
	}
	return ParseCell(cellPath, data, read)
}

// ParseCell is LoadCell with the cell file's bytes already in hand.
func ParseCell(cellPath string, data []byte, read ReadFileFunc) (*Cell, error) {
	d, err := newJSONDoc(cellPath, data)
	if err != nil {
		return nil, err
	}
	var cf cellFile
	if err := d.decodeStrict(&cf); err != nil {
		return nil, err
	}
	l := &cellLoader{doc: d, dir: filepath.Dir(cellPath), read: read}
	c := l.build(&cf)
	if len(l.errs) > 0 {
		return nil, l.errs
	}
	c.Sources = append([]SourceFile{{Path: cellPath, Data: data}}, l.sources...)
	return c, nil
}

type cellLoader struct {
	doc       *jsonDoc
	dir       string
	read      ReadFileFunc
	errs      FileErrors
	sources   []SourceFile
	armsSoFar []string
}

func (l *cellLoader) errf(field, format string, args ...any) {
	l.errs = append(l.errs, l.doc.errf(field, format, args...))
}

// resolve turns a path written in the cell file into one relative to the
// working directory (absolute paths stay as they are).
func (l *cellLoader) resolve(p string) string {
	if filepath.IsAbs(p) {
		return p
	}
	return filepath.Join(l.dir, filepath.FromSlash(path.Clean(p)))
}

func (l *cellLoader) readSource(field, p string) ([]byte, string, bool) {
	full := l.resolve(p)
	data, err := l.read(full)
	if err != nil {
		l.errf(field, "cannot read %q (paths are relative to the cell file): %v", p, err)
		return nil, full, false
	}
	for _, s := range l.sources {
		if s.Path == full {
			return data, full, true
		}
	}
	l.sources = append(l.sources, SourceFile{Path: full, Data: data})
	return data, full, true
}

func (l *cellLoader) build(cf *cellFile) *Cell {
	c := &Cell{Name: cf.Name, TickS: cf.TickS, Planner: cf.Planner}
	if cf.Format != CellFormat {
		l.errf("format", "is %q, want %q", cf.Format, CellFormat)
	}
	if strings.TrimSpace(cf.Name) == "" {
		l.errf("name", "is missing: give the cell a name (it appears in logs and captures)")
	}
	if !(cf.TickS > 0) || !cellFinite(cf.TickS) {
		l.errf("tick_period_s", "must be a positive number of seconds (e.g. 0.01 for 100 Hz), got %v", cf.TickS)
	}
	l.checkPlanner(&cf.Planner)
	l.buildArms(c, cf)
	l.buildBars(c, cf)
	l.buildFigure(c, cf)
	if c.Figure != nil {
		l.buildStrings(c, cf)
		l.buildMarkers(c, cf)
	}
	l.buildTracker(c, cf)
	return c
}

func (l *cellLoader) checkPlanner(p *PlannerDefaults) {
	nonNeg := func(field string, v float64) {
		if !(v >= 0) || !cellFinite(v) {
			l.errf("planner."+field, "must be a finite number ≥ 0 (0 means the default), got %v", v)
		}
	}
	if p.HorizonSteps < 0 {
		l.errf("planner.horizon_steps", "must be ≥ 0 (0 means the default), got %d", p.HorizonSteps)
	}
	if p.MaxIterations < 0 {
		l.errf("planner.max_iterations", "must be ≥ 0 (0 means the default), got %d", p.MaxIterations)
	}
	nonNeg("horizon_step_s", p.HorizonStepS)
	nonNeg("tracking_weight", p.TrackingWeight)
	nonNeg("nominal_weight", p.NominalWeight)
	nonNeg("smoothness_weight", p.SmoothnessWeight)
	nonNeg("max_deviation", p.MaxDeviation)
	nonNeg("position_margin", p.PositionMargin)
}

// newName checks an arm or bar name: non-empty, no dots or spaces (it is
// part of joint and bar-point names), not seen before. It records the name
// and reports whether it is usable.
func (l *cellLoader) newName(field, kind, name string, seen map[string]bool) bool {
	switch {
	case name == "" || strings.ContainsAny(name, ". \t"):
		l.errf(field, "must be a non-empty name without dots or spaces, got %q", name)
		return false
	case seen[name]:
		l.errf(field, "%s %q is defined twice", kind, name)
		return false
	}
	seen[name] = true
	return true
}

func (l *cellLoader) buildArms(c *Cell, cf *cellFile) {
	if len(cf.Arms) == 0 {
		l.errf("arms", "the cell has no arms")
	}
	seen := map[string]bool{}
	for i, af := range cf.Arms {
		at := fmt.Sprintf("arms[%d]", i)
		if !l.newName(at+".name", "arm", af.Name, seen) {
			continue
		}
		if af.URDF == "" {
			l.errf(at+".urdf", "is missing: name the arm's URDF file")
			continue
		}
		data, full, ok := l.readSource(at+".urdf", af.URDF)
		if !ok {
			continue
		}
		u, err := ParseURDF(full, data)
		if err != nil {
			l.errf(at+".urdf", "%v", err)
			continue
		}
		if af.BaseLink == "" || af.TipLink == "" {
			l.errf(at+".base_link", "base_link and tip_link are both required")
			continue
		}
		chain, err := u.Chain(af.BaseLink, af.TipLink)
		if err != nil {
			l.errf(at+".tip_link", "%v", err)
			continue
		}
		arm := CellArm{
			Name:   af.Name,
			Chain:  chain,
			Base:   PoseFromXYZRPY(af.BasePose.XYZ, af.BasePose.RPY),
			Offset: len(c.jointNames),
		}
		for k := 0; k < 3; k++ {
			if !cellFinite(af.BasePose.XYZ[k]) || !cellFinite(af.BasePose.RPY[k]) {
				l.errf(at+".base_pose", "must be finite")
			}
		}
		joints := chain.Joints()
		known := map[string]bool{}
		for _, j := range joints {
			known[j.Name] = true
		}
		for name := range af.Joints {
			if !known[name] {
				l.errf(at+".joints."+name, "the chain %s→%s of %s has no movable joint %q", af.BaseLink, af.TipLink, af.URDF, name)
			}
		}
		switch {
		case af.Home == nil:
			arm.Home = make([]float64, len(joints))
		case len(af.Home) != len(joints):
			l.errf(at+".home", "has %d values, the arm has %d movable joints", len(af.Home), len(joints))
			arm.Home = make([]float64, len(joints))
		default:
			arm.Home = append([]float64(nil), af.Home...)
		}
		for k, j := range joints {
			jl, ok := l.jointLimit(at, af, j)
			if !ok {
				jl = JointLimit{Lower: j.Lower, Upper: j.Upper, MaxVelocity: j.VelocityLimit}
			}
			jl.Name = af.Name + "." + j.Name
			arm.Limits = append(arm.Limits, jl)
			c.jointNames = append(c.jointNames, jl.Name)
			c.limits = append(c.limits, jl)
			if h := arm.Home[k]; !(h >= jl.Lower && h <= jl.Upper) {
				l.errf(fmt.Sprintf("%s.home[%d]", at, k), "home position %v of %s is outside its limits [%v, %v]", h, jl.Name, jl.Lower, jl.Upper)
			}
		}
		c.Arms = append(c.Arms, arm)
	}
}

// jointLimit merges the URDF's limits with the cell file's, refusing a
// looser one: the cell may tighten a robot's limits, never widen them.
func (l *cellLoader) jointLimit(at string, af armFile, j ChainJoint) (JointLimit, bool) {
	field := at + ".joints." + j.Name
	jf, ok := af.Joints[j.Name]
	if !ok {
		l.errf(field, "is missing: every movable joint needs accel_limit_per_s2 (URDF has no acceleration limits)")
		return JointLimit{}, false
	}
	jl := JointLimit{Lower: j.Lower, Upper: j.Upper, MaxVelocity: j.VelocityLimit}
	good := true
	if jf.AccelLimit == nil || !(*jf.AccelLimit > 0) || !cellFinite(*jf.AccelLimit) {
		l.errf(field+".accel_limit_per_s2", "must be a positive finite number (rad/s² or m/s²)")
		good = false
	} else {
		jl.MaxAccel = *jf.AccelLimit
	}
	if v := jf.Lower; v != nil {
		switch {
		case !cellFinite(*v):
			l.errf(field+".lower", "must be finite")
			good = false
		case *v < j.Lower:
			l.errf(field+".lower", "%v is looser than the URDF's lower limit %v: a cell may only tighten limits", *v, j.Lower)
			good = false
		default:
			jl.Lower = *v
		}
	}
	if v := jf.Upper; v != nil {
		switch {
		case !cellFinite(*v):
			l.errf(field+".upper", "must be finite")
			good = false
		case *v > j.Upper:
			l.errf(field+".upper", "%v is looser than the URDF's upper limit %v: a cell may only tighten limits", *v, j.Upper)
			good = false
		default:
			jl.Upper = *v
		}
	}
	if v := jf.VelocityLimit; v != nil {
		switch {
		case !(*v > 0) || !cellFinite(*v):
			l.errf(field+".velocity_limit_per_s", "must be a positive finite number")
			good = false
		case *v > j.VelocityLimit:
			l.errf(field+".velocity_limit_per_s", "%v is looser than the URDF's velocity limit %v: a cell may only tighten limits", *v, j.VelocityLimit)
			good = false
		default:
			jl.MaxVelocity = *v
		}
	}
	if good && !(jl.Lower < jl.Upper) {
		l.errf(field, "lower limit %v is not below upper limit %v", jl.Lower, jl.Upper)
		good = false
	}
	if good && (!(jl.MaxVelocity > 0) || math.IsInf(jl.MaxVelocity, 0)) {
		l.errf(field, "has no usable velocity limit (the URDF's is %v): set velocity_limit_per_s", j.VelocityLimit)
		good = false
	}
	return jl, good
}

func (l *cellLoader) armIndex(name string) int {
	for i, a := range l.armsSoFar {
		if a == name {
			return i
		}
	}
	return -1
}

func (l *cellLoader) buildBars(c *Cell, cf *cellFile) {
	l.armsSoFar = l.armsSoFar[:0]
	for _, a := range c.Arms {
		l.armsSoFar = append(l.armsSoFar, a.Name)
	}
	seen := map[string]bool{}
	for i, bf := range cf.Bars {
		at := fmt.Sprintf("bars[%d]", i)
		if !l.newName(at+".name", "bar", bf.Name, seen) {
			continue
		}
		ai := l.armIndex(bf.Arm)
		if ai < 0 {
			l.errf(at+".arm", "no arm named %q", bf.Arm)
			continue
		}
		b := Bar{Name: bf.Name, Arm: ai}
		pseen := map[string]bool{}
		for k, pf := range bf.Points {
			pat := fmt.Sprintf("%s.points[%d]", at, k)
			if pf.Name == "" || pseen[pf.Name] {
				l.errf(pat+".name", "must be a unique non-empty name, got %q", pf.Name)
				continue
			}
			pseen[pf.Name] = true
			for _, v := range pf.PositionM {
				if !cellFinite(v) {
					l.errf(pat+".position_m", "must be finite")
				}
			}
			b.Points = append(b.Points, BarPoint{Name: pf.Name, PositionM: pf.PositionM})
		}
		if len(b.Points) == 0 {
			l.errf(at+".points", "a bar needs at least one point")
		}
		c.Bars = append(c.Bars, b)
	}
}

func (l *cellLoader) buildFigure(c *Cell, cf *cellFile) {
	raw := strings.TrimSpace(string(cf.Figure))
	switch {
	case raw == "" || raw == "null":
		l.errf("figure", "is missing: give a figure file path or an inline figure object")
	case strings.HasPrefix(raw, "\""):
		var p string
		if err := json.Unmarshal(cf.Figure, &p); err != nil || p == "" {
			l.errf("figure", "must be a file path or an object")
			return
		}
		data, full, ok := l.readSource("figure", p)
		if !ok {
			return
		}
		fig, err := ParseFigure(full, data)
		if err != nil {
			l.errf("figure", "%v", err)
			return
		}
		c.Figure = fig
	case strings.HasPrefix(raw, "{"):
		fig, errs := parseFigureIn(l.doc, "figure")
		if len(errs) > 0 {
			l.errs = append(l.errs, errs...)
			return
		}
		c.Figure = fig
	default:
		l.errf("figure", "must be a file path or an object")
	}
}

func (l *cellLoader) buildStrings(c *Cell, cf *cellFile) {
	if len(cf.Strings) == 0 {
		l.errf("strings", "the figure hangs by nothing: add strings")
	}
	for i, sf := range cf.Strings {
		at := fmt.Sprintf("strings[%d]", i)
		s := CellString{BarPoint: sf.BarPoint, RestLengthM: sf.RestM, StiffnessNPerM: sf.Stiffness}
		bar, point, ok := strings.Cut(sf.BarPoint, ".")
		found := false
		if ok {
			for _, b := range c.Bars {
				if b.Name != bar {
					continue
				}
				for _, p := range b.Points {
					if p.Name == point {
						s.Arm, s.PointTipM, found = b.Arm, p.PositionM, true
					}
				}
			}
		}
		if !found {
			l.errf(at+".bar_point", "no bar point %q (write it as <bar>.<point>)", sf.BarPoint)
		}
		s.Node = c.Figure.NodeIndex(sf.Node)
		if s.Node < 0 {
			l.errf(at+".node", "the figure has no node %q", sf.Node)
		}
		if !(sf.RestM > 0) || !cellFinite(sf.RestM) {
			l.errf(at+".rest_length_m", "must be a positive finite length in m, got %v", sf.RestM)
		}
		if !(sf.Stiffness > 0) || !cellFinite(sf.Stiffness) {
			l.errf(at+".stiffness_n_per_m", "must be a positive finite stiffness in N/m, got %v", sf.Stiffness)
		}
		c.Strings = append(c.Strings, s)
	}
}

func (l *cellLoader) buildMarkers(c *Cell, cf *cellFile) {
	seen := map[string]bool{}
	for i, mf := range cf.Markers {
		at := fmt.Sprintf("markers[%d]", i)
		if mf.ID == "" || seen[mf.ID] {
			l.errf(at+".id", "must be a unique non-empty id, got %q", mf.ID)
			continue
		}
		seen[mf.ID] = true
		n := c.Figure.NodeIndex(mf.Node)
		if n < 0 {
			l.errf(at+".node", "the figure has no node %q", mf.Node)
			continue
		}
		c.Markers = append(c.Markers, Marker{ID: mf.ID, Node: n})
	}
	if len(cf.Markers) == 0 {
		l.errf("markers", "no markers: feedback needs at least one tracked node")
	}
}

func (l *cellLoader) buildTracker(c *Cell, cf *cellFile) {
	t := cf.Tracker
	for k := 0; k < 3; k++ {
		if !cellFinite(t.ToWorld.XYZ[k]) || !cellFinite(t.ToWorld.RPY[k]) {
			l.errf("tracker.to_world", "must be finite")
		}
	}
	c.TrackerToWorld = PoseFromXYZRPY(t.ToWorld.XYZ, t.ToWorld.RPY)
	if !(t.MarkerNoiseM > 0) || !cellFinite(t.MarkerNoiseM) {
		l.errf("tracker.marker_noise_m", "must be a positive standard deviation in m (e.g. 0.001), got %v", t.MarkerNoiseM)
	}
	c.MarkerNoiseM = t.MarkerNoiseM
}
