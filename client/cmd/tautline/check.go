package main

import (
	"fmt"
	"io"
	"math"
	"os"
	"strings"
	"text/tabwriter"

	"tautline/mpc"
	"tautline/sim"
)

func init() {
	register(&command{
		name:    "check",
		summary: "validate a cell (and a cue) and print what they hold",
		run:     runCheck,
	})
}

const checkHelp = `
Reads a cell file and every file it names (URDF arms, figure), validates them,
and prints the arms and joints with their limits, the bars, strings, figure
nodes and markers, the figure's total mass, and the rest pose the figure
settles to with the arms at their home pose (static equilibrium). It warns
about strings that are slack at rest and nodes no marker sees.

With a cue file (CSV, header time_s,<arm>.<joint>,...) it also checks the cue
against every joint limit on the interpolating spline and prints the cue's
duration and each joint's peak speed and acceleration as a percentage of its
limit.

Exits 0 when the files are valid, 1 with every problem found (file, line:column
and field) when they are not, 2 on bad usage.`

func runCheck(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("check", "[--weakest N] CELL [CUE]", checkHelp, stderr)
	weakest := fs.Int("weakest", 5, "how many of the cue's weakest authority windows to print (0: skip the authority analysis)")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if fs.NArg() < 1 || fs.NArg() > 2 {
		fs.Usage()
		return fmt.Errorf("%w: want a cell file and optionally a cue file, got %d arguments", errUsage, fs.NArg())
	}
	cell, err := sim.LoadCell(fs.Arg(0), os.ReadFile)
	if err != nil {
		return err
	}
	if err := printCell(stdout, fs.Arg(0), cell); err != nil {
		return err
	}
	if fs.NArg() == 2 {
		return checkCue(stdout, cell, fs.Arg(1), weakest)
	}
	return nil
}

// loadCue reads and checks a cue file against the cell's joints.
func loadCue(cell *sim.Cell, path string) (*mpc.Cue, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, err
	}
	return mpc.ParseCue(path, data, mpc.CueJointsOf(cell), mpc.CueSettings{TickS: cell.TickS})
}

func checkCue(w io.Writer, cell *sim.Cell, path string, weakest *int) error {
	cue, err := loadCue(cell, path)
	if err != nil {
		return err
	}
	fmt.Fprintf(w, "\ncue %s: %.3f s (from %.3f s to %.3f s), every limit respected on the spline\n", path, cue.DurationS(), cue.StartS(), cue.EndS())
	tw := tabwriter.NewWriter(w, 2, 8, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "  joint\tmin\tmax\tpeak speed\tof limit\tat s\tpeak accel\tof limit\tat s\t")
	for _, p := range cue.Peaks() {
		fmt.Fprintf(tw, "  %s\t%.3f\t%.3f\t%.3f\t%.0f%%\t%.2f\t%.3f\t%.0f%%\t%.2f\t\n", p.Name, p.MinPosition, p.MaxPosition,
			p.PeakSpeed, 100*p.PeakSpeedOfLimit, p.PeakSpeedAtS, p.PeakAccel, 100*p.PeakAccelOfLimit, p.PeakAccelAtS)
	}
	tw.Flush()
	if err := printAuthority(w, cell, cue, *weakest); err != nil {
		return err
	}
	fmt.Fprintf(w, "\nok: %s is valid for this cell\n", path)
	return nil
}

// printAuthority prints the cue's weakest windows of planner authority.
func printAuthority(w io.Writer, cell *sim.Cell, cue *mpc.Cue, n int) error {
	if n <= 0 {
		return nil
	}
	nom, err := mpc.SimulateNominal(cell, cue, cue.StartS(), cue.EndS(), mpc.NominalSettings{})
	if err != nil {
		return fmt.Errorf("simulating the cue on the model: %w", err)
	}
	wins, err := mpc.CueAuthority(cell, cue, nom, cue.StartS(), cue.EndS(), mpc.AuthoritySettings{})
	if err != nil {
		return fmt.Errorf("authority: %w", err)
	}
	if len(wins) == 0 {
		return nil
	}
	strongest := 0.0
	for _, a := range wins {
		strongest = math.Max(strongest, a.MinSingular)
	}
	fmt.Fprintf(w, "\nplanner authority (smallest singular value of marker motion per joint correction, m/rad), %d weakest of %d windows\n", min(n, len(wins)), len(wins))
	tw := tabwriter.NewWriter(w, 2, 8, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "  window s\tmin σ\tmax σ\tof best window\tanchor rank\tweakest joint\t")
	for _, a := range wins[:min(n, len(wins))] {
		rel := 0.0
		if strongest > 0 {
			rel = a.MinSingular / strongest
		}
		fmt.Fprintf(tw, "  %.2f–%.2f\t%.3g\t%.3g\t%.0f%%\t%d\t%s\t\n", a.StartS, a.EndS, a.MinSingular, a.MaxSingular, 100*rel, a.AnchorRank, a.WeakestJoint)
	}
	tw.Flush()
	return nil
}

// restPose settles the figure with the arms at home and returns node
// positions and anchors.
func restPose(cell *sim.Cell) (x, anchors []float64, err error) {
	model, err := cell.NewModel(cell.TickS)
	if err != nil {
		return nil, nil, err
	}
	ws := cell.NewWorkspace(model)
	q := make([]float64, cell.NumJoints())
	cell.HomeTo(q)
	anchors = make([]float64, 3*cell.NumAnchors())
	ws.AnchorsTo(anchors, q)
	x = make([]float64, model.Dim())
	if err := model.RestPose(ws.StepWorkspace(), x, anchors); err != nil {
		return nil, nil, fmt.Errorf("the figure does not settle with the arms at home: %w", err)
	}
	return x, anchors, nil
}

func printCell(w io.Writer, path string, cell *sim.Cell) error {
	fmt.Fprintf(w, "cell %q (%s)\n", cell.Name, path)
	fmt.Fprintf(w, "  tick %.4g ms (%.4g Hz); marker noise %.3g mm; planner horizon %d steps\n",
		cell.TickS*1e3, 1/cell.TickS, cell.MarkerNoiseM*1e3, cell.Planner.HorizonSteps)

	fmt.Fprintf(w, "\narms (%d joints in all)\n", cell.NumJoints())
	tw := tabwriter.NewWriter(w, 2, 8, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "  joint\tlower\tupper\tmax velocity\tmax accel\t")
	for _, a := range cell.Arms {
		for k, l := range a.Limits {
			unit := "rad"
			if a.Chain.Joints()[k].Kind == sim.Prismatic {
				unit = "m"
			}
			fmt.Fprintf(tw, "  %s\t%s\t%s\t%.3g %s/s\t%.3g %s/s²\t\n", l.Name,
				limitText(l.Lower, unit), limitText(l.Upper, unit), l.MaxVelocity, unit, l.MaxAccel, unit)
		}
	}
	tw.Flush()
	for _, a := range cell.Arms {
		fmt.Fprintf(w, "  %s: base at (%.3f, %.3f, %.3f) m, home %s\n", a.Name, a.Base.P[0], a.Base.P[1], a.Base.P[2], vecText(a.Home))
	}

	fmt.Fprintf(w, "\nbars\n")
	for _, b := range cell.Bars {
		var pts []string
		for _, p := range b.Points {
			pts = append(pts, fmt.Sprintf("%s (%.3f, %.3f, %.3f)", p.Name, p.PositionM[0], p.PositionM[1], p.PositionM[2]))
		}
		fmt.Fprintf(w, "  %s on %s: %s m in the tip frame\n", b.Name, cell.Arms[b.Arm].Name, strings.Join(pts, ", "))
	}

	fig := cell.Figure
	fmt.Fprintf(w, "\nfigure: %d nodes, %d rods, total mass %.3f kg\n", len(fig.Nodes), len(fig.Rods), cell.TotalMassKg())
	fmt.Fprintf(w, "markers: %d\n", len(cell.Markers))
	seen := make([]bool, len(fig.Nodes))
	for _, m := range cell.Markers {
		seen[m.Node] = true
	}

	x, anchors, err := restPose(cell)
	if err != nil {
		return err
	}
	model, _ := cell.NewModel(cell.TickS)
	fmt.Fprintf(w, "\nstrings at rest (arms at home)\n")
	tw = tabwriter.NewWriter(w, 2, 8, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "  bar point\tnode\trest length m\tlength m\ttension N\t")
	var warnings []string
	for i, s := range cell.Strings {
		n := s.Node
		dx := x[3*n] - anchors[3*i]
		dy := x[3*n+1] - anchors[3*i+1]
		dz := x[3*n+2] - anchors[3*i+2]
		length := math.Sqrt(dx*dx + dy*dy + dz*dz)
		t := model.StringTension(i, x, anchors)
		fmt.Fprintf(tw, "  %s\t%s\t%.3f\t%.4f\t%.3f\t\n", s.BarPoint, fig.Nodes[n].Name, s.RestLengthM, length, t)
		if t <= 0 {
			warnings = append(warnings, fmt.Sprintf("string %s → %s is slack at rest (length %.3f m ≤ rest length %.3f m)", s.BarPoint, fig.Nodes[n].Name, length, s.RestLengthM))
		}
	}
	tw.Flush()

	fmt.Fprintf(w, "\nrest pose (static equilibrium, world frame, m)\n")
	tw = tabwriter.NewWriter(w, 2, 8, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "  node\tmass kg\tx\ty\tz\tmarker\t")
	var unseen []string
	for i, nd := range fig.Nodes {
		mark := ""
		for _, m := range cell.Markers {
			if m.Node == i {
				mark = m.ID
			}
		}
		fmt.Fprintf(tw, "  %s\t%.3f\t%.3f\t%.3f\t%.3f\t%s\t\n", nd.Name, nd.MassKg, x[3*i], x[3*i+1], x[3*i+2], mark)
		if !seen[i] && !nd.Anchored {
			unseen = append(unseen, nd.Name)
		}
	}
	tw.Flush()
	if len(unseen) > 0 {
		warnings = append(warnings, fmt.Sprintf("%d nodes no marker sees (the estimator infers them from the model): %s", len(unseen), strings.Join(unseen, ", ")))
	}
	if len(warnings) > 0 {
		fmt.Fprintf(w, "\nwarnings\n")
		for _, s := range warnings {
			fmt.Fprintf(w, "  - %s\n", s)
		}
	}
	fmt.Fprintf(w, "\nok: %s is valid\n", path)
	return nil
}

func limitText(v float64, unit string) string {
	if math.IsInf(v, 0) {
		return "none"
	}
	return fmt.Sprintf("%.3f %s", v, unit)
}

func vecText(v []float64) string {
	parts := make([]string, len(v))
	for i, x := range v {
		parts[i] = fmt.Sprintf("%.3g", x)
	}
	return "[" + strings.Join(parts, " ") + "]"
}
