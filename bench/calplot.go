package bench

import (
	"encoding/json"
	"fmt"
	"html/template"
	"image/color"
	"io"
	"math"
	"path/filepath"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"

	"stopgap/internal/vocab"
)

// Files of the calibration figures in a replay report and of a tune report.
const (
	ReliabilityPlotFile = "reliability.png"
	ConfidencePlotFile  = "confidence_vs_misalignment.png"
	TuneJSONFile        = "tune.json"
	TunePlotFile        = "coverage_harm_vs_cutoff.png"
	TuneHTMLFile        = "tune.html"
)

// savePlot writes p as a PNG of w x h centimetres.
func savePlot(p *plot.Plot, path string, w, h vg.Length) error {
	if err := p.Save(w, h, path); err != nil {
		return fmt.Errorf("bench: plot %s: %w", filepath.Base(path), err)
	}
	return nil
}

// writeReliabilityPlot draws the reliability diagram: per confidence bin,
// the observed share of ticks that met the criterion against the mean
// confidence, with the diagonal of perfect calibration; the frames per bin
// are written beside each point.
func writeReliabilityPlot(path string, cals ...Calibration) error {
	p := plot.New()
	p.Title.Text = "Reliability: confidence vs observed share within tolerance"
	p.X.Label.Text = "confidence (bin mean)"
	p.Y.Label.Text = "observed share with misalignment <= tolerance"
	p.X.Min, p.X.Max, p.Y.Min, p.Y.Max = 0, 1, 0, 1
	p.Add(plotter.NewGrid())
	diag, _ := plotter.NewLine(plotter.XYs{{X: 0, Y: 0}, {X: 1, Y: 1}})
	diag.Dashes = []vg.Length{vg.Points(4), vg.Points(3)}
	p.Add(diag)
	p.Legend.Add("perfect calibration", diag)
	cols := []color.Color{color.RGBA{R: 220, G: 110, A: 255}, color.RGBA{R: 40, G: 100, B: 200, A: 255}}
	for i, cal := range cals {
		if cal.Frames == 0 {
			continue
		}
		var xy plotter.XYs
		var labels []string
		for _, b := range cal.Bins {
			if b.Frames > 0 {
				xy = append(xy, plotter.XY{X: float64(b.ConfMean), Y: float64(b.Observed)})
				labels = append(labels, fmt.Sprintf("%d", b.Frames))
			}
		}
		lp, pts, err := plotter.NewLinePoints(xy)
		if err != nil {
			return fmt.Errorf("bench: plot %s: %w", filepath.Base(path), err)
		}
		lp.Color, pts.Color = cols[i%2], cols[i%2]
		p.Add(lp, pts)
		p.Legend.Add(fmt.Sprintf("%s: ECE %.3f, Brier %.3f, %d ticks", cal.Source, float64(cal.ECE), float64(cal.Brier), cal.Frames), lp, pts)
		lb, err := plotter.NewLabels(plotter.XYLabels{XYs: xy, Labels: labels})
		if err == nil {
			p.Add(lb)
		}
	}
	p.Legend.Top, p.Legend.Left = true, true
	return savePlot(p, path, 16*vg.Centimeter, 14*vg.Centimeter)
}

// writeConfidenceScatter draws each missing tick's confidence against its
// measured misalignment, with the tolerance marked.
func writeConfidenceScatter(path string, ticks []TickRow, toleranceMrad float64) error {
	p := plot.New()
	p.Title.Text = "Confidence vs measured misalignment (missing ticks)"
	p.X.Label.Text = "misalignment measured from the images (mrad)"
	p.Y.Label.Text = "confidence"
	p.Y.Min, p.Y.Max = 0, 1
	p.Add(plotter.NewGrid())
	var xy plotter.XYs
	maxX := toleranceMrad * 2
	for _, r := range ticks {
		if r.State == TickLive || math.IsNaN(r.Confidence) || math.IsNaN(r.MisalignMrad) {
			continue
		}
		xy = append(xy, plotter.XY{X: r.MisalignMrad, Y: r.Confidence})
		maxX = math.Max(maxX, r.MisalignMrad)
	}
	if len(xy) > 0 {
		sc, err := plotter.NewScatter(xy)
		if err != nil {
			return fmt.Errorf("bench: plot %s: %w", filepath.Base(path), err)
		}
		sc.GlyphStyle = draw.GlyphStyle{Color: color.NRGBA{R: 220, G: 110, A: 150}, Radius: vg.Points(2), Shape: draw.CircleGlyph{}}
		p.Add(sc)
	}
	tl, _ := plotter.NewLine(plotter.XYs{{X: toleranceMrad, Y: 0}, {X: toleranceMrad, Y: 1}})
	tl.Color = color.RGBA{R: 180, A: 255}
	p.Add(tl)
	p.Legend.Add(fmt.Sprintf("tolerance %g mrad", toleranceMrad), tl)
	p.X.Min, p.X.Max = 0, maxX*1.05
	return savePlot(p, path, 16*vg.Centimeter, 12*vg.Centimeter)
}

// writeTunePlot draws coverage and harm rate against the cutoff, with the
// recommendation and the tolerance marked.
func writeTunePlot(path string, res TuneResult) error {
	p := plot.New()
	p.Title.Text = "Coverage and harm rate vs cutoff"
	p.X.Label.Text = "confidence cutoff"
	p.Y.Label.Text = "share"
	p.X.Min, p.X.Max, p.Y.Min, p.Y.Max = 0, 1, 0, 1
	p.Add(plotter.NewGrid())
	var cov, harm plotter.XYs
	for _, pt := range res.Points {
		if !math.IsNaN(float64(pt.Coverage)) {
			cov = append(cov, plotter.XY{X: pt.Cutoff, Y: float64(pt.Coverage)})
		}
		if !math.IsNaN(float64(pt.HarmRatePSNR)) {
			harm = append(harm, plotter.XY{X: pt.Cutoff, Y: float64(pt.HarmRatePSNR)})
		}
	}
	for _, s := range []struct {
		xy   plotter.XYs
		name string
		col  color.Color
	}{{cov, "coverage (missing ticks shown PREDICTED)", color.RGBA{G: 120, B: 60, A: 255}},
		{harm, fmt.Sprintf("harm rate (PREDICTED worse than hold by > %g dB)", HarmPSNRMarginDB), color.RGBA{R: 200, A: 255}}} {
		if len(s.xy) == 0 {
			continue
		}
		lp, pts, err := plotter.NewLinePoints(s.xy)
		if err != nil {
			return fmt.Errorf("bench: plot %s: %w", filepath.Base(path), err)
		}
		lp.Color, pts.Color = s.col, s.col
		p.Add(lp, pts)
		p.Legend.Add(s.name, lp)
	}
	if h := res.Tolerance.MaxHarmRate; h > 0 {
		l, _ := plotter.NewLine(plotter.XYs{{X: 0, Y: h}, {X: 1, Y: h}})
		l.Dashes = []vg.Length{vg.Points(4), vg.Points(3)}
		l.Color = color.RGBA{R: 200, A: 255}
		p.Add(l)
		p.Legend.Add(fmt.Sprintf("tolerated harm rate %g", h), l)
	}
	if r := float64(res.Recommended); !math.IsNaN(r) {
		l, _ := plotter.NewLine(plotter.XYs{{X: r, Y: 0}, {X: r, Y: 1}})
		l.Width = vg.Points(2)
		p.Add(l)
		p.Legend.Add(fmt.Sprintf("recommended cutoff %g [%s, %s]", r, fmtFloat(res.CILow, 2), fmtFloat(res.CIHigh, 2)), l)
	}
	p.Legend.Top = true
	return savePlot(p, path, 18*vg.Centimeter, 13*vg.Centimeter)
}

// WriteTuneReport writes dir holding tune.json, the coverage/harm plot and
// tune.html with the safety caution. Like a replay report, it is written
// into a hidden directory next to dir and renamed only when complete; an
// existing non-empty dir is refused (ErrDestExists) unless overwrite.
func WriteTuneReport(dir string, res TuneResult, overwrite bool) error {
	return writeDirAtomic(dir, overwrite, "tune report", func(tmp string) error {
		if err := writeFile(filepath.Join(tmp, TuneJSONFile), func(w io.Writer) error {
			enc := json.NewEncoder(w)
			enc.SetIndent("", "  ")
			return enc.Encode(res)
		}); err != nil {
			return err
		}
		if err := writeTunePlot(filepath.Join(tmp, TunePlotFile), res); err != nil {
			return err
		}
		tpl, err := template.New("tune").Funcs(template.FuncMap{"f": fmtFloat}).Parse(tuneHTML)
		if err != nil {
			return fmt.Errorf("bench: tune template: %w", err)
		}
		if err := writeFile(filepath.Join(tmp, TuneHTMLFile), func(w io.Writer) error {
			return tpl.Execute(w, struct {
				CautionTitle string
				Caution      string
				R            TuneResult
				Plot         string
			}{vocab.CautionTitle, vocab.Caution, res, TunePlotFile})
		}); err != nil {
			return err
		}
		return nil
	})
}

const tuneHTML = `<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>stopgap cutoff tuning</title>
<style>
body { font-family: sans-serif; margin: 1.5em auto; max-width: 1100px; color: #222; }
.caution { border: 4px solid #b00; background: #fff1f0; padding: 0.8em 1.2em; margin-bottom: 1.5em; }
.caution h2 { color: #b00; margin: 0 0 0.4em 0; }
table { border-collapse: collapse; } th, td { border: 1px solid #aaa; padding: 0.2em 0.5em; text-align: right; }
th { background: #eee; } .rec { background: #e8f5e9; font-weight: bold; }
</style></head><body>
<h1>stopgap cutoff tuning</h1>
<div class="caution" id="safety-caution"><h2>{{.CautionTitle}}</h2><p>{{.Caution}}</p>
<p>A recommended cutoff is measured on the replayed drives only; it says how often the static scene was placed
worse than the frozen picture, never whether moving road users were shown. An administrator's limits and the
operator's licensed procedures take precedence.</p></div>
<h2>Recommendation</h2>
{{if .R.Enough}}{{if eq (f .R.Recommended 2) "n/a"}}<p><b>No recommendation.</b> {{.R.Reason}}</p>
{{else}}<p><b>Recommended cutoff {{f .R.Recommended 2}}</b>, 95 % bootstrap interval [{{f .R.CILow 2}}, {{f .R.CIHigh 2}}]
({{.R.Resamples}} resamples of whole {{.R.Bootstrap}}; {{.R.Gaps}} gaps), allowed range [{{.R.MinCutoff}}, {{.R.MaxCutoff}}].</p>{{end}}
{{else}}<p><b>No recommendation: {{.R.Reason}}</b></p>{{end}}
<p>Tolerance: {{with .R.Tolerance}}{{if .MaxHarmRate}}harm rate at most {{.MaxHarmRate}}{{end}}{{if .MinSSIM}}mean SSIM of what is shown at least {{.MinSSIM}}{{end}}{{if .MaxMisalignMrad}}mean misalignment of PREDICTED ticks at most {{.MaxMisalignMrad}} mrad{{end}}{{end}}.
Drives: {{range .R.Drives}}{{.}} {{end}}</p>
<p><img src="{{.Plot}}" alt="coverage and harm rate against the cutoff"></p>
<h2>Sweep</h2>
<table><tr><th>cutoff</th><th>missing</th><th>PREDICTED</th><th>coverage</th><th>harm rate (PSNR)</th><th>harm rate (SSIM)</th><th>shown PSNR dB</th><th>shown SSIM</th><th>misalignment mrad</th><th>meets</th></tr>
{{range .R.Points}}<tr><td>{{.Cutoff}}</td><td>{{.Missing}}</td><td>{{.Predicted}}</td><td>{{f .Coverage 3}}</td><td>{{f .HarmRatePSNR 3}}</td><td>{{f .HarmRateSSIM 3}}</td><td>{{f .ShownPSNRdB 2}}</td><td>{{f .ShownSSIM 4}}</td><td>{{f .MisalignMrad 2}}</td><td>{{.Meets}}</td></tr>
{{end}}</table>
<p>Data: <a href="tune.json">tune.json</a>.</p>
</body></html>
`
