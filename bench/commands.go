package bench

import (
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"log/slog"
	"math"
	"path/filepath"
	"sort"

	"stopgap/filter"
	"stopgap/predictor"
	"stopgap/stream/operator"
	"stopgap/stream/recording"
)

// CommandsUse is what a replay did with the operator's commands.
type CommandsUse struct {
	// File is the control log read (operator.ControlsFile), "" if none.
	File string `json:"file,omitempty"`
	// Used is true when the commands drove the bicycle model.
	Used bool `json:"used"`
	// Why says why they were not used ("" when used).
	Why string `json:"why,omitempty"`
	// Count is the number of commands in the file; Rejected how many of
	// them the filter rejected (bad values, out of order).
	Count    int `json:"count"`
	Rejected int `json:"rejected"`
	// Actuator is the actuator model used: configured, or fitted from the
	// drive (Fitted) with the residual RMS of yaw rate and speed.
	DelayMs     float64 `json:"delay_ms"`
	SteerLagS   float64 `json:"steer_lag_s"`
	SpeedLagS   float64 `json:"speed_lag_s"`
	Fitted      bool    `json:"fitted"`
	SteerRMSRps float64 `json:"steer_rms_rps,omitempty"`
	SpeedRMSMps float64 `json:"speed_rms_mps,omitempty"`
}

// replayCommands is the command side of one replay: the commands in
// arrival order and their arrival times on the receiver clock.
type replayCommands struct {
	cmds    []filter.Command
	arrival []int64
	next    int
}

// feed gives the filter every command that has arrived by deadlineUs.
func (rc *replayCommands) feed(flt *filter.Filter, deadlineUs int64, log *slog.Logger) {
	for ; rc.next < len(rc.cmds) && rc.arrival[rc.next] <= deadlineUs; rc.next++ {
		if err := flt.AddCommand(rc.cmds[rc.next]); err != nil {
			log.Debug("command rejected", "t_us", rc.cmds[rc.next].TimeUs, "err", err)
		}
	}
}

// loadCommands finds the drive's control log (in cfg.Drive, else beside
// cfg.ArrivalsFile) and decides the filter configuration:
//
//   - no log, cfg.NoCommands, or an explicit CTRV model: commands unused,
//     fcfg unchanged (a zero Model becomes CTRV);
//   - otherwise the model is the bicycle, and the actuator is
//     cfg.Filter.Actuator when its delay or a lag is set, else fitted from
//     the whole drive's commands and telemetry (filter.FitActuator; the
//     actuator is a property of the vehicle, so a fit over the drive is a
//     calibration, not a look into each gap's future); a replay that
//     ignores the telemetry (cfg.Motion.NoTelemetry) does not fit on it:
//     without a configured actuator its commands are unused.
//
// The commands reach the filter at their recorded t_arrival_us (a station
// next to the relay); their send time t_us is taken as on the vehicle clock
// (station and vehicle synchronised, e.g. by NTP).
func loadCommands(cfg ReplayConfig, telemetry []recording.TelemetryRow, log *slog.Logger) (filter.Config, *replayCommands, CommandsUse, error) {
	fcfg := cfg.Filter
	var use CommandsUse
	var rows []operator.Control
	for _, dir := range []string{cfg.Drive, filepath.Dir(cfg.ArrivalsFile)} {
		if dir == "." && cfg.ArrivalsFile == "" {
			continue
		}
		path := filepath.Join(dir, operator.ControlsFile)
		r, err := operator.ReadControls(path)
		if errors.Is(err, fs.ErrNotExist) {
			continue
		}
		if err != nil {
			return fcfg, nil, use, fmt.Errorf("replay: %w; fix the file or replay with the commands off", err)
		}
		use.File, rows = path, r
		break
	}
	use.Count = len(rows)
	notUsed := func(why string) (filter.Config, *replayCommands, CommandsUse, error) {
		if fcfg.Model == filter.ModelInvalid {
			fcfg.Model = filter.ModelCTRV
		}
		use.Why = why
		return fcfg, nil, use, nil
	}
	switch {
	case cfg.NoCommands:
		return notUsed("switched off")
	case len(rows) == 0:
		return notUsed("no commands recorded (" + operator.ControlsFile + ")")
	case fcfg.Model == filter.ModelCTRV:
		return notUsed("the CTRV model takes no commands; use the bicycle model")
	case fcfg.WheelbaseM == 0:
		return notUsed("no wheelbase configured for the bicycle model")
	}
	fcfg.Model = filter.ModelBicycle
	rc := &replayCommands{cmds: make([]filter.Command, len(rows)), arrival: make([]int64, len(rows))}
	order := make([]int, len(rows))
	for i := range order {
		order[i] = i
	}
	// The log is in arrival order; within one arrival, send order.
	sort.SliceStable(order, func(a, b int) bool {
		ra, rb := &rows[order[a]], &rows[order[b]]
		if ra.ArrivalUs != rb.ArrivalUs {
			return ra.ArrivalUs < rb.ArrivalUs
		}
		return ra.TUs < rb.TUs
	})
	for k, i := range order {
		rc.cmds[k], rc.arrival[k] = rows[i].Command(), rows[i].ArrivalUs
	}
	act := fcfg.Actuator
	if act.DelayUs == 0 && act.SteerLagS == 0 && act.SpeedLagS == 0 {
		if cfg.Motion.NoTelemetry {
			// The fit would read the telemetry this replay ignores.
			fcfg.Model = cfg.Filter.Model
			return notUsed("the actuator is fitted from telemetry, which this replay ignores; configure the delay and lags")
		}
		samples := make([]filter.Sample, len(telemetry))
		for i, r := range telemetry {
			samples[i] = SampleFromRow(r)
		}
		sort.SliceStable(samples, func(a, b int) bool { return samples[a].TimeUs < samples[b].TimeUs })
		fit, err := filter.FitActuator(rc.cmds, samples, fcfg.WheelbaseM)
		if err != nil {
			// A drive too short to fit on is still replayed, on telemetry.
			log.Warn("commands not used: the actuator cannot be fitted from this drive; configure the delay and lags", "file", use.File, "err", err)
			fcfg.Model = cfg.Filter.Model
			return notUsed(fmt.Sprintf("the actuator could not be fitted (%v); configure the delay and lags", err))
		}
		act.DelayUs, act.SteerLagS, act.SpeedLagS = fit.Actuator.DelayUs, fit.Actuator.SteerLagS, fit.Actuator.SpeedLagS
		use.Fitted, use.SteerRMSRps, use.SpeedRMSMps = true, fit.SteerRMSRps, fit.SpeedRMSMps
		log.Info("actuator fitted from the drive", "delay_ms", float64(act.DelayUs)/1000, "steer_lag_s", act.SteerLagS, "speed_lag_s", act.SpeedLagS)
	}
	fcfg.Actuator = act
	use.Used = true
	use.DelayMs, use.SteerLagS, use.SpeedLagS = float64(act.DelayUs)/1000, act.SteerLagS, act.SpeedLagS
	return fcfg, rc, use, nil
}

// EvalSource is one row of the motion-source evaluation: which inputs
// drive the filter.
type EvalSource struct {
	// Name labels the row.
	Name string
	// Commands: the operator's commands drive the bicycle model.
	Commands bool
	// Motion says which of the vehicle's telemetry and the video's
	// ego-motion feed the filter; the zero value is telemetry alone. A row
	// without telemetry (Motion.NoTelemetry) is replayed once: the
	// telemetry link makes no difference to it.
	Motion MotionSources
	// Truth replaces the filter by the exact motion from truth.csv: the
	// upper bound of any motion source for the predictor as it is (the
	// telemetry link makes no difference to it).
	Truth bool
}

// The rows of the evaluation (EvalSources) and its bound.
var (
	// TelemetryOnlySource is the vehicle's telemetry alone.
	TelemetryOnlySource = EvalSource{Name: "telemetry only"}
	// CommandsAddedSource adds the operator's commands to the telemetry.
	CommandsAddedSource = EvalSource{Name: "commands added", Commands: true}
	// VideoOnlySource is the video's ego-motion alone: no telemetry, no
	// commands (a camera-only vehicle).
	VideoOnlySource = EvalSource{Name: "video ego-motion only", Motion: MotionSources{NoTelemetry: true, Video: true}}
	// AllSourcesSource is telemetry, the commands and the video's
	// ego-motion together.
	AllSourcesSource = EvalSource{Name: "all together", Commands: true, Motion: MotionSources{Video: true}}
	// ExactMotionSource is the reference row of the evaluation on drives
	// with a truth.csv (see EvalSource.Truth).
	ExactMotionSource = EvalSource{Name: "exact motion (bound)", Truth: true}
)

// EvalSources returns the evaluation's rows, in order.
func EvalSources() []EvalSource {
	return []EvalSource{TelemetryOnlySource, CommandsAddedSource, VideoOnlySource, AllSourcesSource}
}

// apply returns cfg set up for source s.
func (s EvalSource) apply(cfg ReplayConfig) ReplayConfig {
	cfg.NoCommands = !s.Commands
	cfg.Motion = s.Motion
	cfg.truthMotion = nil
	if s.Truth {
		cfg.truthMotion = func(tr []recording.Truth) predictor.MotionSource { return exactMotion(tr) }
	}
	return cfg
}

// usesTelemetry reports whether the row's figures depend on the telemetry
// link.
func (s EvalSource) usesTelemetry() bool { return !s.Truth && !s.Motion.NoTelemetry }

// TelemetryLinks returns the evaluation's two telemetry links: lost with
// the video, and on its own channel (never lost).
func TelemetryLinks() []TelemetryLink {
	return []TelemetryLink{{}, {Own: true}}
}

// EvalRow is one replay of the motion-source evaluation.
type EvalRow struct {
	Source string `json:"source"`
	// Telemetry is the telemetry link of the row; nil when the row uses no
	// telemetry (the video alone, the exact motion).
	Telemetry *TelemetryLink `json:"telemetry,omitempty"`
	// Motion names the sources that fed the filter (MotionSources.String;
	// "-" for the exact motion).
	Motion string `json:"motion"`
	// Model is the filter's motion model.
	Model string `json:"model"`
	// HoldPSNRdB and ShownPSNRdB are the mean PSNR of hold and of what the
	// operator is shown (PREDICTED, or the held frame when STALE) over the
	// scored missing ticks; GainDB their difference.
	HoldPSNRdB  Float `json:"hold_psnr_db"`
	ShownPSNRdB Float `json:"shown_psnr_db"`
	GainDB      Float `json:"gain_db"`
	// Predicted counts the PREDICTED ticks scored, Harm those worse than
	// hold by more than 1 dB PSNR, HarmRate their share.
	Predicted int   `json:"predicted"`
	Harm      int   `json:"harm_psnr"`
	HarmRate  Float `json:"harm_rate_psnr"`
	// Missing is the number of missing ticks.
	Missing int `json:"missing"`
	// MisalignMrad is the mean misalignment of the motion used against the
	// exact motion (truth.csv) over the PREDICTED ticks, mrad (NaN without
	// truth): how wrong the motion was, apart from the image synthesis.
	MisalignMrad Float `json:"truth_misalign_mrad_mean"`
	// VideoSamples counts the video's ego-motion estimates the filter
	// accepted (0 unless the row uses the video).
	VideoSamples int `json:"video_samples"`
	// Commands is what the replay did with the commands.
	Commands CommandsUse `json:"commands"`
	// Skipped, when not empty, says why the row has no figures: the
	// source needs an input the drive lacks (a row with commands on a
	// drive without a usable controls.csv). Its numbers are then NaN
	// (null) or zero.
	Skipped string `json:"skipped,omitempty"`
}

// CompareEvalSources replays cfg (without writing a report) once per
// source and per telemetry link (once for a source that uses no
// telemetry) and returns one row each, sources outer. cfg.Telemetry,
// cfg.Motion and cfg.NoCommands are overridden. A source with commands
// on a drive whose commands cannot be used (none recorded, or no actuator
// to drive them) gives one row with Skipped set to the reason, and the
// other rows are still replayed.
func CompareEvalSources(ctx context.Context, cfg ReplayConfig, sources []EvalSource, links []TelemetryLink) ([]EvalRow, error) {
	var rows []EvalRow
	for _, src := range sources {
		for _, link := range links {
			c := src.apply(cfg)
			c.Telemetry, c.Examples = link, -1
			var out replayOutput
			sum, err := replayDrive(ctx, c, &out)
			if err != nil {
				return nil, fmt.Errorf("motion source %q: %w", src.Name, err)
			}
			if src.Commands && !sum.Commands.Used {
				closeExamples(out.examples)
				nan := Float(math.NaN())
				rows = append(rows, EvalRow{Source: src.Name, Motion: "-", Model: "-", HoldPSNRdB: nan, ShownPSNRdB: nan,
					GainDB: nan, HarmRate: nan, MisalignMrad: nan, Commands: sum.Commands,
					Skipped: "needs the operator's commands: " + sum.Commands.Why})
				break // the link does not change what the drive lacks
			}
			var mis float64
			nm := 0
			for _, t := range out.rows {
				if t.State == TickPredicted && !math.IsNaN(t.TruthMisalignMrad) {
					mis += t.TruthMisalignMrad
					nm++
				}
			}
			closeExamples(out.examples)
			hold, shown := float64(sum.Methods.Hold.PSNRdBMean), float64(sum.Methods.Predicted.PSNRdBMean)
			row := EvalRow{Source: src.Name, Motion: sum.Motion.String(), Model: sum.FilterModel,
				HoldPSNRdB: Float(hold), ShownPSNRdB: Float(shown), GainDB: Float(shown - hold),
				Predicted: sum.PredictedOnly.Frames, Harm: sum.PredictedOnly.HarmPSNR,
				HarmRate: Float(float64(sum.PredictedOnly.HarmPSNR) / float64(max(1, sum.PredictedOnly.Frames))),
				Missing:  sum.TicksMissing, Commands: sum.Commands, MisalignMrad: Float(mis / float64(nm)),
				VideoSamples: sum.VideoSamples}
			if src.Truth {
				row.Motion, row.Model = "-", "-"
			}
			if src.usesTelemetry() {
				row.Telemetry = &link
			}
			rows = append(rows, row)
			if !src.usesTelemetry() {
				break // the link makes no difference
			}
		}
	}
	return rows, nil
}

func closeExamples(es []Example) {
	for _, e := range es {
		closeExample(e)
	}
}

// exactMotion is the motion between two times from truth.csv, poses
// interpolated linearly between frames, with zero covariance.
type exactMotion []recording.Truth

// Relative implements predictor.MotionSource.
func (m exactMotion) Relative(t0Us, t1Us int64) (filter.Motion, error) {
	if len(m) == 0 {
		return filter.Motion{}, fmt.Errorf("exact motion: no truth rows: %w", ErrReplayInput)
	}
	p0, p1 := m.at(t0Us), m.at(t1Us)
	c, sn := math.Cos(p0[2]), math.Sin(p0[2])
	dx, dy := p1[0]-p0[0], p1[1]-p0[1]
	return filter.Motion{T0Us: t0Us, T1Us: t1Us, DxM: c*dx + sn*dy, DyM: -sn*dx + c*dy,
		DyawRad: math.Remainder(p1[2]-p0[2], 2*math.Pi)}, nil
}

// at returns (x, y, yaw) at tUs, clamped to the rows' span.
func (m exactMotion) at(tUs int64) [3]float64 {
	i := sort.Search(len(m), func(i int) bool { return m[i].CaptureUs >= tUs })
	switch {
	case i == 0:
		return [3]float64{m[0].XM, m[0].YM, m[0].YawRad}
	case i == len(m):
		l := m[len(m)-1]
		return [3]float64{l.XM, l.YM, l.YawRad}
	}
	a, b := m[i-1], m[i]
	f := float64(tUs-a.CaptureUs) / float64(b.CaptureUs-a.CaptureUs)
	return [3]float64{a.XM + f*(b.XM-a.XM), a.YM + f*(b.YM-a.YM), a.YawRad + f*math.Remainder(b.YawRad-a.YawRad, 2*math.Pi)}
}

// WriteEvalTable writes rows as a plain-text table, one line per row; a
// skipped row (EvalRow.Skipped) says why instead of giving figures.
func WriteEvalTable(w io.Writer, rows []EvalRow) {
	fmt.Fprintf(w, "%-22s %-20s %-16s %-8s %9s %9s %8s %10s %8s %9s\n", "source", "telemetry", "motion", "model", "hold dB", "shown dB", "gain dB", "predicted", "harm", "mis mrad")
	for _, r := range rows {
		link := "-"
		switch {
		case r.Telemetry == nil:
		case r.Telemetry.Own:
			link = "own channel"
		default:
			link = "lost with the video"
		}
		if r.Skipped != "" {
			fmt.Fprintf(w, "%-22s %-20s skipped: %s\n", r.Source, link, r.Skipped)
			continue
		}
		fmt.Fprintf(w, "%-22s %-20s %-16s %-8s %9.2f %9.2f %8.2f %10d %7.1f%% %9.2f\n", r.Source, link, r.Motion, r.Model,
			r.HoldPSNRdB, r.ShownPSNRdB, r.GainDB, r.Predicted, 100*r.HarmRate, r.MisalignMrad)
	}
}
