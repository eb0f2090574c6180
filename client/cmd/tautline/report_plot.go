package main

import (
	"fmt"
	"image/color"
	"io"
	"math"
	"os"
	"path/filepath"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
	"gonum.org/v1/plot/vg/vgsvg"

	"tautline/client"
)

// series is one labelled line.
type series struct {
	label  string
	x, y   []float64
	dashed bool // grey and dashed: a nominal to compare with
}

// palette gives each run a colour that stays the same across plots:
// open-loop orange, closed-loop blue, others from a short list.
func runColor(label string, i int) color.Color {
	switch label {
	case "open-loop":
		return color.RGBA{R: 230, G: 120, B: 20, A: 255}
	case "closed-loop":
		return color.RGBA{R: 30, G: 90, B: 200, A: 255}
	}
	others := []color.Color{
		color.RGBA{R: 40, G: 150, B: 60, A: 255},
		color.RGBA{R: 150, G: 40, B: 150, A: 255},
		color.RGBA{R: 100, G: 100, B: 100, A: 255},
	}
	return others[i%len(others)]
}

func xys(x, y []float64) plotter.XYs {
	pts := make(plotter.XYs, len(x))
	for i := range x {
		pts[i].X, pts[i].Y = x[i], y[i]
	}
	return pts
}

// linePlot draws series against each other.
func linePlot(title, xLabel, yLabel string, ss []series) (*plot.Plot, error) {
	p := plot.New()
	p.Title.Text = title
	p.X.Label.Text = xLabel
	p.Y.Label.Text = yLabel
	p.Add(plotter.NewGrid())
	for i, s := range ss {
		if len(s.x) == 0 {
			continue
		}
		l, err := plotter.NewLine(xys(s.x, s.y))
		if err != nil {
			return nil, fmt.Errorf("plot %q, %s: %w", title, s.label, err)
		}
		l.Color = runColor(s.label, i)
		l.Width = vg.Points(1.2)
		if s.dashed {
			l.Color = color.Gray{Y: 90}
			l.Dashes = []vg.Length{vg.Points(4), vg.Points(2)}
		}
		p.Add(l)
		p.Legend.Add(s.label, l)
	}
	p.Legend.Top = true
	return p, nil
}

// savePlot writes p as dir/name.png and dir/name.svg.
func savePlot(p *plot.Plot, dir, name string, w, h vg.Length) ([]string, error) {
	return saveTiles([][]*plot.Plot{{p}}, dir, name, w, h)
}

// saveTiles writes a grid of plots as one PNG and one SVG.
func saveTiles(plots [][]*plot.Plot, dir, name string, w, h vg.Length) ([]string, error) {
	rows, cols := len(plots), len(plots[0])
	tiles := draw.Tiles{Rows: rows, Cols: cols, PadX: vg.Millimeter * 3, PadY: vg.Millimeter * 3,
		PadTop: vg.Millimeter * 2, PadBottom: vg.Millimeter * 2, PadLeft: vg.Millimeter * 2, PadRight: vg.Millimeter * 2}
	var files []string
	for _, format := range []string{"png", "svg"} {
		var c vg.CanvasWriterTo
		switch format {
		case "png":
			c = vgimg.PngCanvas{Canvas: vgimg.NewWith(vgimg.UseWH(w, h), vgimg.UseDPI(110))}
		case "svg":
			c = vgsvg.New(w, h)
		}
		dc := draw.New(c)
		if rows == 1 && cols == 1 {
			plots[0][0].Draw(dc)
		} else {
			canvases := plot.Align(plots, tiles, dc)
			for r := range plots {
				for k := range plots[r] {
					if plots[r][k] != nil {
						plots[r][k].Draw(canvases[r][k])
					}
				}
			}
		}
		path := filepath.Join(dir, name+"."+format)
		if err := writeTo(path, c); err != nil {
			return files, err
		}
		files = append(files, path)
	}
	return files, nil
}

func writeTo(path string, wt io.WriterTo) error {
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	if _, err := wt.WriteTo(f); err != nil {
		f.Close()
		return fmt.Errorf("%s: %w", path, err)
	}
	return f.Close()
}

// band is a shaded horizontal band from lo to hi over [x0, x1].
func band(x0, x1, lo, hi float64, c color.Color) (*plotter.Polygon, error) {
	poly, err := plotter.NewPolygon(plotter.XYs{{X: x0, Y: lo}, {X: x1, Y: lo}, {X: x1, Y: hi}, {X: x0, Y: hi}})
	if err != nil {
		return nil, err
	}
	poly.Color = c
	poly.LineStyle.Width = 0
	return poly, nil
}

// histogram draws one histogram per sample, overlaid with see-through
// fills, on shared bins.
func histogram(title, xLabel string, labels []string, samples [][]float64, bins int) (*plot.Plot, error) {
	p := plot.New()
	p.Title.Text = title
	p.X.Label.Text = xLabel
	p.Y.Label.Text = "ticks"
	lo, hi := 0.0, 0.0
	first := true
	for _, s := range samples {
		for _, v := range s {
			if first || v < lo {
				lo = v
			}
			if first || v > hi {
				hi = v
			}
			first = false
		}
	}
	if first {
		return p, nil
	}
	// A long tail would squeeze the body into a few bins: the range ends
	// at 1.5 times the largest 99th percentile and the last bin counts
	// everything beyond.
	var p99 float64
	for _, s := range samples {
		p99 = math.Max(p99, client.SpreadOf(s, 1).P99)
	}
	if cut := 1.5 * p99; cut > lo && cut < hi {
		hi = cut
		p.Title.Text += fmt.Sprintf(" (last bin: ≥ %.3g)", hi-(hi-lo)/float64(bins))
	}
	if hi <= lo {
		hi = lo + 1e-3
	}
	width := (hi - lo) / float64(bins)
	for i, s := range samples {
		if len(s) == 0 {
			continue
		}
		counts := make([]float64, bins)
		for _, v := range s {
			k := int((v - lo) / width)
			counts[min(max(k, 0), bins-1)]++
		}
		hb := make([]plotter.HistogramBin, bins)
		for k := range hb {
			hb[k] = plotter.HistogramBin{Min: lo + float64(k)*width, Max: lo + float64(k+1)*width, Weight: counts[k]}
		}
		h := &plotter.Histogram{Bins: hb, Width: width, LineStyle: plotter.DefaultLineStyle}
		r, g, b, _ := runColor(labels[i], i).RGBA()
		h.FillColor = color.NRGBA{R: uint8(r >> 8), G: uint8(g >> 8), B: uint8(b >> 8), A: 110}
		h.LineStyle.Color = runColor(labels[i], i)
		p.Add(h)
		p.Legend.Add(labels[i], h)
	}
	p.Legend.Top = true
	return p, nil
}
