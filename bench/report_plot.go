package bench

import (
	"fmt"
	"image/color"
	"math"
	"path/filepath"
	"strconv"
	"strings"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"

	"stopgap/internal/vocab"
)

// methodColor gives each method a fixed plot colour.
func methodColor(m Method) color.Color {
	switch m {
	case MethodHold:
		return color.RGBA{R: 120, G: 120, B: 120, A: 255}
	case MethodRotation:
		return color.RGBA{R: 40, G: 100, B: 200, A: 255}
	default:
		return color.RGBA{R: 220, G: 110, B: 0, A: 255}
	}
}

// writeAgePlot draws one metric against picture age: every scored tick as a
// small dot and, per method, a line through the bucket means (placed at
// the bucket's mean age). The legend carries the frame count per bucket.
func writeAgePlot(path string, ticks []TickRow, s Summary, title, ylabel string,
	value func(Scores) float64, bucketMean func(BucketStats) Float) error {
	p := plot.New()
	p.Title.Text = title + " (dots: ticks; line: bucket means)"
	p.X.Label.Text = vocab.AgeTerm + " (" + vocab.AgeUnit + ")"
	p.Y.Label.Text = ylabel
	p.Legend.Top, p.Legend.Left = false, true // metrics fall with age: bottom left is usually empty
	p.Add(plotter.NewGrid())
	points := 0
	for _, m := range Methods() {
		var xy plotter.XYs
		for i := range ticks {
			sc := ticks[i].MethodScores(m)
			v := value(sc)
			if math.IsNaN(v) || math.IsInf(v, 0) || math.IsNaN(ticks[i].AgeMs) {
				continue
			}
			xy = append(xy, plotter.XY{X: ticks[i].AgeMs, Y: v})
		}
		points += len(xy)
		col := methodColor(m)
		if len(xy) > 0 {
			sc, err := plotter.NewScatter(xy)
			if err != nil {
				return fmt.Errorf("bench: plot %s: %w", filepath.Base(path), err)
			}
			r, g, b, _ := col.RGBA()
			faint := color.NRGBA{R: uint8(r >> 8), G: uint8(g >> 8), B: uint8(b >> 8), A: 110} // not premultiplied
			sc.GlyphStyle = draw.GlyphStyle{Color: faint, Radius: vg.Points(2), Shape: draw.CircleGlyph{}}
			p.Add(sc)
		}
		ms := s.Methods.Get(m)
		var means plotter.XYs
		counts := make([]string, 0, numBuckets)
		for _, b := range ms.Buckets {
			counts = append(counts, strconv.Itoa(b.Frames))
			mv, age := float64(bucketMean(b)), float64(b.AgeMsMean)
			if b.Frames > 0 && !math.IsNaN(mv) && !math.IsNaN(age) {
				means = append(means, plotter.XY{X: age, Y: mv})
			}
		}
		label := fmt.Sprintf("%s (n per bucket %s)", m, strings.Join(counts, "/"))
		if len(means) > 0 {
			line, pts, err := plotter.NewLinePoints(means)
			if err != nil {
				return fmt.Errorf("bench: plot %s: %w", filepath.Base(path), err)
			}
			line.Color, line.Width = col, vg.Points(2)
			pts.GlyphStyle = draw.GlyphStyle{Color: col, Radius: vg.Points(3.5), Shape: draw.CircleGlyph{}}
			p.Add(line, pts)
			p.Legend.Add(label, line, pts)
		} else {
			line, err := plotter.NewLine(plotter.XYs{})
			if err != nil {
				return fmt.Errorf("bench: plot %s: %w", filepath.Base(path), err)
			}
			line.Color = col
			p.Legend.Add(label, line)
		}
	}
	p.X.Min = 0
	if points == 0 {
		p.X.Max, p.Y.Min, p.Y.Max = 500, 0, 1
		p.Title.Text = title + " (no scored ticks)"
	}
	if err := p.Save(8*vg.Inch, 5*vg.Inch, path); err != nil {
		return fmt.Errorf("bench: plot %s: %w", filepath.Base(path), err)
	}
	return nil
}
