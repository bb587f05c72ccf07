package train

import (
	"bytes"
	"fmt"
	"image/color"
	"math"

	"pdwave/internal/atomicfile"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
)

// PlotLoss writes a PNG with two panels: the training loss (running mean of
// 25 steps) and the validation loss against the step, and, if the
// validation has truth, the wavefront error over Noll 2–10 and 2–21 as a
// fraction of the true variance. The file is written atomically
// (internal/atomicfile).
func PlotLoss(path string, hist []StepStats, vals []Validation) error {
	png, err := plotLossPNG(path, hist, vals)
	if err != nil {
		return err
	}
	return atomicfile.WriteBytes(path, png)
}

// plotLossPNG draws the figure of PlotLoss and returns the PNG; path only
// names the figure in errors.
func plotLossPNG(path string, hist []StepStats, vals []Validation) ([]byte, error) {
	top := plot.New()
	top.Title.Text = "pdwave training"
	top.X.Label.Text = "step"
	top.Y.Label.Text = "loss (metric/data power + prior)"
	var tr plotter.XYs
	const win = 25
	var sum float64
	for i, st := range hist {
		sum += st.Loss
		if i >= win {
			sum -= hist[i-win].Loss
		}
		n := min(i+1, win)
		tr = append(tr, plotter.XY{X: float64(st.Step + 1), Y: sum / float64(n)})
	}
	var vl, e10, e21 plotter.XYs
	for _, v := range vals {
		vl = append(vl, plotter.XY{X: float64(v.Step), Y: v.Loss})
		if e := v.ErrFrac(2, 10); !math.IsNaN(e) {
			e10 = append(e10, plotter.XY{X: float64(v.Step), Y: e})
		}
		if e := v.ErrFrac(2, 21); !math.IsNaN(e) {
			e21 = append(e21, plotter.XY{X: float64(v.Step), Y: e})
		}
	}
	if err := addLine(top, tr, "training (mean of 25 steps)", 0); err != nil {
		return nil, err
	}
	if err := addLine(top, vl, "validation", 1); err != nil {
		return nil, err
	}
	top.Legend.Top = true
	bottom := plot.New()
	bottom.X.Label.Text = "step"
	bottom.Y.Label.Text = "error / true variance"
	if err := addLine(bottom, e10, "Noll 2–10", 2); err != nil {
		return nil, err
	}
	if err := addLine(bottom, e21, "Noll 2–21", 3); err != nil {
		return nil, err
	}
	bottom.Legend.Top = true
	bottom.Y.Min = 0
	const w, h = 16 * vg.Centimeter, 18 * vg.Centimeter
	img := vgimg.New(w, h)
	dc := draw.New(img)
	tiles := draw.Tiles{Rows: 2, Cols: 1, PadTop: vg.Millimeter, PadBottom: vg.Millimeter, PadLeft: vg.Millimeter, PadRight: vg.Millimeter, PadY: 2 * vg.Millimeter}
	canv := plot.Align([][]*plot.Plot{{top}, {bottom}}, tiles, dc)
	top.Draw(canv[0][0])
	bottom.Draw(canv[1][0])
	var buf bytes.Buffer
	png := vgimg.PngCanvas{Canvas: img}
	if _, err := png.WriteTo(&buf); err != nil {
		return nil, fmt.Errorf("train: drawing %s: %w", path, err)
	}
	return buf.Bytes(), nil
}

func addLine(p *plot.Plot, xy plotter.XYs, name string, color int) error {
	if len(xy) == 0 {
		return nil
	}
	l, pts, err := plotter.NewLinePoints(xy)
	if err != nil {
		return fmt.Errorf("train: plotting %s: %w", name, err)
	}
	l.Color = plotter.DefaultLineStyle.Color
	c := plotColors[color%len(plotColors)]
	l.Color, pts.Color = c, c
	pts.Radius = vg.Points(1.5)
	if len(xy) > 200 {
		pts.Radius = 0
	}
	p.Add(l, pts)
	p.Legend.Add(name, l)
	return nil
}

var plotColors = []color.Color{
	color.RGBA{R: 0x1f, G: 0x5f, B: 0xbf, A: 0xff},
	color.RGBA{R: 0xd9, G: 0x5f, B: 0x02, A: 0xff},
	color.RGBA{R: 0x1b, G: 0x9e, B: 0x77, A: 0xff},
	color.RGBA{R: 0x75, G: 0x70, B: 0xb3, A: 0xff},
}
