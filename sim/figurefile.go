package sim

import (
	"bytes"
	"encoding/json"
	"errors"
	"math"
	"sort"
	"strconv"
	"strings"
)

// FigureFormat is the format string a figure file must carry.
const FigureFormat = "tautline.figure/1"

// ParseFigure reads a figure file (JSON, "format": "tautline.figure/1").
// file names the file in messages; data is its content.
//
// The file is an object with these fields:
//
//	format   "tautline.figure/1" (required)
//	comment  free text (optional)
//	nodes    array of nodes (at least one):
//	           name            unique non-empty string
//	           mass_kg         number > 0 (also for anchored nodes)
//	           position_m      [x, y, z], the initial position in the world frame
//	           drag_ns_per_m   number ≥ 0, optional (0)
//	           anchored        true fixes the node at position_m, optional (false)
//	rods     array of rods (optional when there is one node):
//	           nodes             [name, name], two different nodes
//	           rest_length_m     number > 0, or the string "initial" for the
//	                             distance between the two initial positions
//	           stiffness_n_per_m number > 0
//	           damping_ns_per_m  number ≥ 0, optional (0)
//
// In a figure of more than one node every node must be joined by at least
// one rod. Unknown fields are errors. The returned error is a FileErrors
// listing every problem found, each with its line:column and field path.
func ParseFigure(file string, data []byte) (*Figure, error) {
	d, err := newJSONDoc(file, data)
	if err != nil {
		var fe *FileError
		if !errors.As(err, &fe) {
			fe = &FileError{File: file, Msg: err.Error()}
		}
		return nil, FileErrors{fe}
	}
	fig, errs := parseFigureIn(d, "")
	if len(errs) > 0 {
		return nil, errs
	}
	return fig, nil
}

// parseFigureIn reads the figure object at path prefix of d ("" for the
// whole document, "figure" for a figure inline in a cell file, so errors
// read "figure.nodes[3].mass_kg"). Inline figures may leave out "format";
// when present it must be FigureFormat. It returns every problem found, in
// file order; the figure is nil if there is any.
func parseFigureIn(d *jsonDoc, prefix string) (*Figure, FileErrors) {
	p := &figureParser{d: d}
	root, err := decodeGeneric(d.data)
	if err != nil {
		return nil, FileErrors{d.errf(prefix, "JSON: %v", err)}
	}
	v, ok := lookupPath(root, prefix)
	if !ok {
		return nil, FileErrors{d.errf(prefix, "missing: a figure object is required here")}
	}
	fig := p.figure(v, prefix)
	if len(p.errs) > 0 {
		sort.SliceStable(p.errs, func(i, j int) bool {
			a, b := p.errs[i], p.errs[j]
			if a.Line != b.Line {
				return a.Line < b.Line
			}
			return a.Col < b.Col
		})
		return nil, p.errs
	}
	return fig, nil
}

type figureParser struct {
	d    *jsonDoc
	errs FileErrors
}

func (p *figureParser) fail(path, format string, args ...any) {
	p.errs = append(p.errs, p.d.errf(path, format, args...))
}

func joinPath(prefix, key string) string {
	if prefix == "" {
		return key
	}
	return prefix + "." + key
}

// object checks v is an object and that it has only the allowed keys.
func (p *figureParser) object(v any, path string, allowed ...string) (map[string]any, bool) {
	obj, ok := v.(map[string]any)
	if !ok {
		p.fail(path, "must be a JSON object")
		return nil, false
	}
	keys := make([]string, 0, len(obj))
	for k := range obj {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	for _, k := range keys {
		known := false
		for _, a := range allowed {
			known = known || k == a
		}
		if !known {
			p.fail(joinPath(path, k), "unknown field (allowed here: %s)", strings.Join(allowed, ", "))
		}
	}
	return obj, true
}

// number reads a finite number at obj[key]. Absent: ok=false and, when
// required, an error.
func (p *figureParser) number(obj map[string]any, path, key string, required bool) (float64, bool) {
	fp := joinPath(path, key)
	v, present := obj[key]
	if !present {
		if required {
			p.fail(fp, "missing: a number is required")
		}
		return 0, false
	}
	return p.finite(v, fp)
}

func (p *figureParser) finite(v any, path string) (float64, bool) {
	n, ok := v.(json.Number)
	if !ok {
		p.fail(path, "must be a number")
		return 0, false
	}
	f, err := strconv.ParseFloat(string(n), 64)
	if err != nil || math.IsInf(f, 0) || math.IsNaN(f) {
		p.fail(path, "%s is not a finite number", string(n))
		return 0, false
	}
	return f, true
}

func (p *figureParser) figure(v any, prefix string) *Figure {
	obj, ok := p.object(v, prefix, "format", "comment", "nodes", "rods")
	if !ok {
		return nil
	}
	fpath := joinPath(prefix, "format")
	switch f, present := obj["format"]; {
	case !present && prefix == "":
		p.fail(fpath, "missing: a figure file starts with \"format\": %q", FigureFormat)
	case present && f != FigureFormat:
		p.fail(fpath, "is %v; this program reads %q", f, FigureFormat)
	}
	if c, present := obj["comment"]; present {
		if _, ok := c.(string); !ok {
			p.fail(joinPath(prefix, "comment"), "must be a string")
		}
	}
	fig := &Figure{}
	nodesPath := joinPath(prefix, "nodes")
	nodes, ok := obj["nodes"].([]any)
	switch {
	case obj["nodes"] == nil:
		p.fail(nodesPath, "missing: a figure needs at least one node")
	case !ok:
		p.fail(nodesPath, "must be an array of nodes")
	case len(nodes) == 0:
		p.fail(nodesPath, "is empty: a figure needs at least one node")
	}
	names := map[string]int{}
	errsBeforeNodes := len(p.errs)
	for i, nv := range nodes {
		fig.Nodes = append(fig.Nodes, p.node(nv, nodesPath+"["+strconv.Itoa(i)+"]", names, i))
	}
	rodsPath := joinPath(prefix, "rods")
	var rods []any
	if rv, present := obj["rods"]; present {
		if rods, ok = rv.([]any); !ok {
			p.fail(rodsPath, "must be an array of rods")
		}
	}
	joined := make([]bool, len(fig.Nodes))
	endsBad, nodesBad := false, len(p.errs) > errsBeforeNodes
	pairs := map[[2]int]int{}
	for i, rv := range rods {
		path := rodsPath + "[" + strconv.Itoa(i) + "]"
		r, endsOK, ok := p.rod(rv, path, names, fig)
		if !endsOK {
			endsBad = true
			continue
		}
		key := [2]int{min(r.A, r.B), max(r.A, r.B)}
		if j, dup := pairs[key]; dup {
			p.fail(path+".nodes", "joins the same two nodes as rods[%d]", j)
		}
		pairs[key] = i
		joined[r.A], joined[r.B] = true, true
		if ok {
			fig.Rods = append(fig.Rods, r)
		}
	}
	// A rod whose ends could not be read may be the one that joins a node;
	// say nothing about joins then rather than report a false problem.
	if len(fig.Nodes) > 1 && !endsBad && !nodesBad {
		for i, j := range joined {
			if !j {
				p.fail(nodesPath+"["+strconv.Itoa(i)+"].name", "node %q is joined to nothing: add a rod to it or remove it", fig.Nodes[i].Name)
			}
		}
	}
	return fig
}

func (p *figureParser) node(v any, path string, names map[string]int, i int) Node {
	var n Node
	obj, ok := p.object(v, path, "name", "mass_kg", "position_m", "drag_ns_per_m", "anchored")
	if !ok {
		return n
	}
	namePath := path + ".name"
	switch s, isStr := obj["name"].(string); {
	case obj["name"] == nil:
		p.fail(namePath, "missing: every node needs a name")
	case !isStr || s == "":
		p.fail(namePath, "must be a non-empty string")
	default:
		if j, dup := names[s]; dup {
			p.fail(namePath, "duplicate node name %q (first used by nodes[%d])", s, j)
		} else {
			names[s] = i
		}
		n.Name = s
	}
	if m, ok := p.number(obj, path, "mass_kg", true); ok {
		if m <= 0 {
			p.fail(path+".mass_kg", "is %g; a mass must be positive", m)
		}
		n.MassKg = m
	}
	posPath := path + ".position_m"
	switch pos, isArr := obj["position_m"].([]any); {
	case obj["position_m"] == nil:
		p.fail(posPath, "missing: give the initial position as [x, y, z] in metres")
	case !isArr || len(pos) != 3:
		p.fail(posPath, "must be an array of three numbers [x, y, z]")
	default:
		for c := range 3 {
			n.PositionM[c], _ = p.finite(pos[c], posPath+"["+strconv.Itoa(c)+"]")
		}
	}
	if c, ok := p.number(obj, path, "drag_ns_per_m", false); ok {
		if c < 0 {
			p.fail(path+".drag_ns_per_m", "is %g; drag must not be negative", c)
		}
		n.DragNsPerM = c
	}
	if a, present := obj["anchored"]; present {
		b, isBool := a.(bool)
		if !isBool {
			p.fail(path+".anchored", "must be true or false")
		}
		n.Anchored = b
	}
	return n
}

// rod reads one rod; endsOK says its two node names were read, ok that
// everything was.
func (p *figureParser) rod(v any, path string, names map[string]int, fig *Figure) (r Rod, endsOK, ok bool) {
	obj, isObj := p.object(v, path, "nodes", "rest_length_m", "stiffness_n_per_m", "damping_ns_per_m")
	if !isObj {
		return r, false, false
	}
	good := true
	nodesPath := path + ".nodes"
	ends, isArr := obj["nodes"].([]any)
	switch {
	case obj["nodes"] == nil:
		p.fail(nodesPath, "missing: a rod joins two nodes, [\"name\", \"name\"]")
		good = false
	case !isArr || len(ends) != 2:
		p.fail(nodesPath, "must be an array of two node names")
		good = false
	default:
		var idx [2]int
		for e := range 2 {
			ep := nodesPath + "[" + strconv.Itoa(e) + "]"
			s, isStr := ends[e].(string)
			j, known := names[s]
			switch {
			case !isStr:
				p.fail(ep, "must be a node name")
				good = false
			case !known:
				p.fail(ep, "unknown node %q", s)
				good = false
			}
			idx[e] = j
		}
		if good && idx[0] == idx[1] {
			p.fail(nodesPath, "joins node %q to itself", fig.Nodes[idx[0]].Name)
			good = false
		}
		r.A, r.B = idx[0], idx[1]
	}
	endsOK = good
	lenPath := path + ".rest_length_m"
	switch lv := obj["rest_length_m"]; {
	case lv == nil:
		p.fail(lenPath, "missing: give a length in metres or \"initial\"")
		good = false
	case lv == "initial":
		if good {
			a, b := fig.Nodes[r.A].PositionM, fig.Nodes[r.B].PositionM
			r.RestLengthM = math.Sqrt((a[0]-b[0])*(a[0]-b[0]) + (a[1]-b[1])*(a[1]-b[1]) + (a[2]-b[2])*(a[2]-b[2]))
			if !(r.RestLengthM > 0) {
				p.fail(lenPath, "is \"initial\" but the two nodes start at the same position")
				good = false
			}
		}
	default:
		if _, isStr := lv.(string); isStr {
			p.fail(lenPath, "must be a number of metres or the string \"initial\"")
			good = false
			break
		}
		l, ok := p.finite(lv, lenPath)
		if ok && l <= 0 {
			p.fail(lenPath, "is %g; a rest length must be positive", l)
		}
		good = good && ok && l > 0
		r.RestLengthM = l
	}
	k, kOK := p.number(obj, path, "stiffness_n_per_m", true)
	if kOK && k <= 0 {
		p.fail(path+".stiffness_n_per_m", "is %g; a stiffness must be positive", k)
	}
	r.StiffnessNPerM = k
	good = good && kOK && k > 0
	if c, cOK := p.number(obj, path, "damping_ns_per_m", false); cOK {
		if c < 0 {
			p.fail(path+".damping_ns_per_m", "is %g; damping must not be negative", c)
		}
		r.DampingNsPerM = c
	}
	return r, endsOK, good
}

// decodeGeneric decodes JSON into maps, slices, json.Number, strings, bools
// and nils.
func decodeGeneric(data []byte) (any, error) {
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.UseNumber()
	var v any
	err := dec.Decode(&v)
	return v, err
}

// lookupPath walks a generic JSON value along a path like "a.b[2].c".
func lookupPath(v any, path string) (any, bool) {
	for path != "" {
		if path[0] == '[' {
			end := strings.IndexByte(path, ']')
			if end < 0 {
				return nil, false
			}
			i, err := strconv.Atoi(path[1:end])
			arr, ok := v.([]any)
			if err != nil || !ok || i < 0 || i >= len(arr) {
				return nil, false
			}
			v, path = arr[i], strings.TrimPrefix(path[end+1:], ".")
			continue
		}
		end := strings.IndexAny(path, ".[")
		key, rest := path, ""
		if end >= 0 {
			key, rest = path[:end], strings.TrimPrefix(path[end:], ".")
		}
		obj, ok := v.(map[string]any)
		if !ok {
			return nil, false
		}
		if v, ok = obj[key]; !ok {
			return nil, false
		}
		path = rest
	}
	return v, true
}
