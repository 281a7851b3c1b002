package bench

import (
	"fmt"
	"html/template"
	"io"
	"math"
	"strconv"

	"stopgap/internal/vocab"
)

// newReportTemplate parses the page template (per call, so that the
// package keeps no mutable state).
func newReportTemplate() (*template.Template, error) {
	return template.New("report").Funcs(template.FuncMap{
		"f": fmtFloat,
		"pct": func(v Float) string {
			if math.IsNaN(float64(v)) {
				return "n/a"
			}
			return strconv.FormatFloat(100*float64(v), 'f', 1, 64) + " %"
		},
	}).Parse(`<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<title>{{.Title}}</title>
<style>
body { font-family: sans-serif; margin: 1.5em auto; max-width: 1200px; color: #222; }
.caution { border: 4px solid #b00; background: #fff1f0; padding: 0.8em 1.2em; margin-bottom: 1.5em; }
.caution h2 { color: #b00; margin: 0 0 0.4em 0; }
table { border-collapse: collapse; margin: 0.5em 0 1.5em 0; }
th, td { border: 1px solid #aaa; padding: 0.25em 0.6em; text-align: right; }
th { background: #eee; }
td.l, th.l { text-align: left; }
.ex { display: flex; flex-wrap: wrap; gap: 0.8em; margin-bottom: 1.5em; }
.ex figure { margin: 0; flex: 1 1 260px; max-width: 380px; }
.ex img { width: 100%; border: 1px solid #888; }
figcaption { font-size: 0.9em; }
</style>
</head>
<body>
<h1>{{.Title}}</h1>
<div class="caution" id="safety-caution">
<h2>{{.CautionTitle}}</h2>
<p>{{.Caution}}</p>
<p>Good scores in this report mean the static scene was placed well; they say nothing about moving road users.</p>
</div>

<h2>Run</h2>
<table>
<tr><th class="l">drive</th><td class="l">{{.S.Drive}}</td></tr>
<tr><th class="l">confidence cutoff</th><td>{{printf "%.3g" .S.Cutoff}}</td></tr>
<tr><th class="l">picture age cap for PREDICTED</th><td>{{printf "%.0f" .S.MaxAgeMs}} ms</td></tr>
{{if .S.ArrivalsFile}}<tr><th class="l">frame arrivals</th><td class="l">recorded, from {{.S.ArrivalsFile}}</td></tr>
{{else}}<tr><th class="l">simulated link</th><td class="l">{{.S.Loss.Model}}, loss rate {{printf "%.3g" .S.Loss.LossRate}}, mean burst {{printf "%.0f" .S.Loss.BurstMs}} ms, extra delay {{printf "%.0f" .S.Loss.ExtraDelayMs}} ms, jitter {{printf "%.0f" .S.Loss.JitterMs}} ms, seed {{.S.Loss.Seed}}</td></tr>
{{end}}<tr><th class="l">display latency / jitter allowance</th><td>{{printf "%.0f" .S.LatencyMs}} ms / {{printf "%.0f" .S.AllowanceMs}} ms</td></tr>
<tr><th class="l">filter model</th><td class="l">{{.S.FilterModel}}</td></tr>
<tr><th class="l">telemetry samples rejected</th><td>{{.S.TelemetryRejected}}</td></tr>
<tr><th class="l">motion sources</th><td class="l">{{.S.Motion}}</td></tr>
<tr><th class="l">ticks</th><td>{{.S.TicksTotal}}</td></tr>
<tr><th class="l">ticks without a real frame</th><td>{{.S.TicksMissing}}</td></tr>
<tr><th class="l">LIVE / PREDICTED / STALE ticks</th><td>{{.S.LiveTicks}} / {{.S.PredictedTicks}} / {{.S.StaleTicks}}</td></tr>
<tr><th class="l">synthesis time p50 / p99 / mean</th><td>{{f .S.SynthMsP50 2}} / {{f .S.SynthMsP99 2}} / {{f .S.SynthMsMean 2}} ms</td></tr>
<tr><th class="l">mean label pixel share</th><td>{{pct .S.LabelPixelShareMean}}</td></tr>
<tr><th class="l">mean unfilled share (pixels no source reached)</th><td>{{pct .S.UnfilledShareMean}}</td></tr>
</table>

{{if .S.UnscoredNote}}<p id="unscored"><b>{{.S.UnscoredNote}}</b></p>
{{end}}{{with .S.Pairing}}<h2>Session and onboard recording</h2>
<table>
<tr><th class="l">session</th><td class="l">{{.Session}}</td></tr>
{{if .Onboard}}<tr><th class="l">onboard recording</th><td class="l">{{.Onboard}}</td></tr>{{end}}
{{if .Line}}<tr><th class="l">pairing</th><td class="l">{{.Line}}</td></tr>
<tr><th class="l">telemetry rows on board / received by the session / only in the session / values differing</th><td>{{.TelemetryOnboard}} / {{.TelemetryPaired}} / {{.TelemetrySessionOnly}} / {{.TelemetryValueDiffs}}</td></tr>
{{end}}{{if .Decisions}}<tr><th class="l">decisions</th><td class="l">{{.Decisions}}</td></tr>{{end}}
</table>
{{if .Differences}}<p>Ticks where the replay decided otherwise than the relay recorded (the relay's table is the reference):</p>
<table id="differences">
<tr><th>tick</th><th class="l">relay</th><th class="l">replay</th><th>relay confidence</th><th>replay confidence</th><th>relay cutoff</th><th>relay age ms</th><th>replay age ms</th></tr>
{{range .Differences}}<tr><td>{{.Tick}}</td><td class="l">{{.Relay}}</td><td class="l">{{.Replay}}</td><td>{{printf "%.4f" .RelayConfidence}}</td><td>{{f .ReplayConfidence 4}}</td><td>{{printf "%.3f" .RelayCutoff}}</td><td>{{printf "%.1f" .RelayAgeMs}}</td><td>{{printf "%.1f" .ReplayAgeMs}}</td></tr>
{{end}}</table>
{{end}}{{end}}
<h2>Scores against the true frames</h2>
<p>Scores are computed on luma before any label is drawn, only on ticks where the real frame was missing
and the recorded frame is available. PSNR is capped at {{printf "%g" .Cap}} dB per frame before averaging.
The picture age is the time from the capture of the newest real frame to the tick. A tick is one
display slot of the camera's frame rate: one frame is shown per tick. MAE is the mean absolute luma
difference in 8-bit grey levels (0 to 255). The unfilled share is the share of a predicted frame's pixels
that no source pixel reached (the edges the moved picture uncovers), filled with neutral grey.</p>
<table>
<tr><th class="l">method</th><th>picture age</th><th>frames</th><th>PSNR dB</th><th>SSIM</th><th>MAE (grey levels)</th></tr>
{{range .Methods}}<tr><td class="l"><b>{{.Name}}</b></td><td>all</td><td>{{.Stats.Frames}}</td><td>{{f .Stats.PSNRdBMean 2}}</td><td>{{f .Stats.SSIMMean 4}}</td><td>{{f .Stats.MAEMean 2}}</td></tr>
{{range .Stats.Buckets}}<tr><td></td><td>{{.Bucket}} ms</td><td>{{.Frames}}</td><td>{{f .PSNRdBMean 2}}</td><td>{{f .SSIMMean 4}}</td><td>{{f .MAEMean 2}}</td></tr>
{{end}}{{end}}</table>

<h2>PREDICTED ticks alone</h2>
<p>The "predicted" rows above show what the operator saw on every missing tick (the held frame when STALE).
Over the {{.S.PredictedOnly.Frames}} PREDICTED ticks alone: PSNR {{f .S.PredictedOnly.PSNRdBMean 2}} dB (hold on the same ticks
{{f .S.PredictedOnly.HoldPSNRdBMean 2}} dB), SSIM {{f .S.PredictedOnly.SSIMMean 4}} (hold {{f .S.PredictedOnly.HoldSSIMMean 4}}).
Harm rate (worse than hold): {{pct .S.PredictedOnly.HarmRatePSNR}} by more than 1 dB PSNR, {{pct .S.PredictedOnly.HarmRateSSIM}} by more than 0.01 SSIM.
Telemetry: {{if .S.Telemetry.Own}}on its own channel, loss rate {{.S.Telemetry.LossRate}}{{else}}shares the fate of the video{{end}}.</p>
{{with .S.Marks}}
<h2>Marks of things that moved</h2>
<p>On {{.Ticks}} PREDICTED ticks with a picture age up to {{.AgeLimitMs}} ms, the marks covered on average {{f .RecallMean 2}} of the pixels where a moving
road user really was or was shown (recall), and {{f .PrecisionMean 2}} of the marked pixels were such pixels (precision); over all
{{.TicksAll}} PREDICTED ticks: {{f .RecallMeanAll 2}} and {{f .PrecisionMeanAll 2}}. Pooled over the pixels of the ticks up to {{.AgeLimitMs}} ms
(a large car weighs more than a distant pedestrian): recall {{f .RecallPooled 2}}, precision {{f .PrecisionPooled 2}}. No mark does not mean nothing moved.</p>{{end}}

<h2>Calibration of the confidence</h2>
<p>The confidence is the probability that the reference road points of a predicted frame are within
{{.S.Calibration.ToleranceMrad}} mrad of where they really are. Measured from the images on {{.S.Calibration.Frames}} missing ticks:
ECE {{f .S.Calibration.ECE 3}}, Brier {{f .S.Calibration.Brier 3}}, mean confidence {{f .S.Calibration.ConfMean 3}}, observed share {{f .S.Calibration.GoodShare 3}}.
{{if .S.CalibrationTruth.Frames}}From truth.csv on {{.S.CalibrationTruth.Frames}} ticks: ECE {{f .S.CalibrationTruth.ECE 3}}, Brier {{f .S.CalibrationTruth.Brier 3}}.{{end}}</p>
<table><tr><th>confidence bin</th><th>frames</th><th>mean confidence</th><th>observed share</th></tr>
{{range .S.Calibration.Bins}}<tr><td>{{printf "%.1f" .Lo}}-{{printf "%.1f" .Hi}}</td><td>{{.Frames}}</td><td>{{f .ConfMean 3}}</td><td>{{f .Observed 3}}</td></tr>
{{end}}</table>
<p><img src="reliability.png" alt="reliability diagram"></p>
<p><img src="confidence_vs_misalignment.png" alt="confidence against measured misalignment"></p>

<h2>Figures</h2>
<p><img src="{{.PSNRPlot}}" alt="PSNR against picture age for hold, rotation and predicted"></p>
<p><img src="{{.SSIMPlot}}" alt="SSIM against picture age for hold, rotation and predicted"></p>

<h2>Examples</h2>
{{if not .Examples}}<p>No example frames were saved for this run.</p>{{end}}
{{range .Examples}}<h3>{{.Heading}}</h3>
<div class="ex">{{range .Figs}}<figure><img src="{{.File}}" alt="{{.Caption}}"><figcaption>{{.Caption}}</figcaption></figure>{{end}}</div>
{{end}}
<p>Data: <a href="summary.json">summary.json</a>, <a href="ticks.csv">ticks.csv</a>.</p>
</body>
</html>
`)
}

type htmlMethod struct {
	Name  string
	Stats MethodStats
}

func (w ReportWriter) writeHTML(path string, s Summary, figs []exampleBlock) error {
	title := w.Title
	if title == "" {
		title = "stopgap replay report"
	}
	var methods []htmlMethod
	for _, m := range Methods() {
		methods = append(methods, htmlMethod{m.String(), *s.Methods.Get(m)})
	}
	data := struct {
		Title              string
		CautionTitle       string
		Caution            string
		S                  Summary
		Cap                float64
		Methods            []htmlMethod
		PSNRPlot, SSIMPlot string
		Examples           []exampleBlock
	}{title, vocab.CautionTitle, vocab.Caution, s, s.cap(), methods, PSNRPlotFile, SSIMPlotFile, figs}
	tpl, err := newReportTemplate()
	if err != nil {
		return fmt.Errorf("bench: report template: %w", err)
	}
	return writeFile(path, func(w io.Writer) error { return tpl.Execute(w, data) })
}
