package bench

import (
	"context"
	"fmt"
	"math"
	"path/filepath"
	"sort"

	"stopgap/filter"
	"stopgap/internal/lossmodel"
	"stopgap/predictor"
	"stopgap/stream/recording"
)

// TruthCalibrationConfig configures CalibrateTruth.
type TruthCalibrationConfig struct {
	// Drives are recordings with a truth.csv.
	Drives []string
	// Losses are the simulated links; every drive is replayed over each.
	Losses []lossmodel.Config
	// Filter, Confidence, Policy and AllowanceMs as in ReplayConfig
	// (zero values: the defaults; Policy only bounds the age, MaxAgeMs 0
	// meaning predictor.DefaultMaxAgeMs).
	Filter      filter.Config
	Confidence  predictor.ConfidenceModel
	MaxAgeMs    float64
	AllowanceMs float64
}

// CalibrateTruth measures the calibration of the confidence against the
// exact misalignment from truth.csv over many simulated links, without
// decoding or warping a single image: for every missing tick of the replay
// schedule (the same schedule, telemetry delivery and filter as Replay) up
// to the maximum age, the confidence of the filter's motion since the held
// frame is compared with TruthMisalignmentPx <= tolerance. It is the fast
// path for calibration over many drives and seeds; Replay measures the
// same quantity per tick, and from the images as well.
func CalibrateTruth(ctx context.Context, cfg TruthCalibrationConfig) (Calibration, error) {
	allow := cfg.AllowanceMs
	if allow == 0 {
		allow = DefaultAllowanceMs
	}
	maxAge := cfg.MaxAgeMs
	if maxAge == 0 {
		maxAge = predictor.DefaultMaxAgeMs
	}
	fcfg := cfg.Filter
	if fcfg.Model == filter.ModelInvalid {
		fcfg.Model = filter.ModelCTRV
	}
	var conf []float64
	var good []bool
	tol := cfg.Confidence.Tolerance()
	for _, d := range cfg.Drives {
		rec, err := recording.Open(d)
		if err != nil {
			return Calibration{}, fmt.Errorf("calibration: %w", err)
		}
		if len(rec.Truth) != len(rec.Frames) || len(rec.Frames) == 0 {
			return Calibration{}, fmt.Errorf("calibration: %s must hold one truth row per frame: %w", filepath.Join(d, recording.TruthFile), ErrReplayInput)
		}
		cam := rec.Camera
		captureUs := make([]int64, len(rec.Frames))
		for i, f := range rec.Frames {
			captureUs[i] = f.CaptureUs
		}
		for _, loss := range cfg.Losses {
			if err := ctx.Err(); err != nil {
				return Calibration{}, err
			}
			arr, err := loss.Simulate(nil, captureUs)
			if err != nil {
				return Calibration{}, fmt.Errorf("calibration: %w", err)
			}
			sched, err := NewSchedule(captureUs, arr.ArrivalUs, int64(math.Round(allow*1000)))
			if err != nil {
				return Calibration{}, fmt.Errorf("calibration: %w", err)
			}
			flt, err := filter.New(fcfg)
			if err != nil {
				return Calibration{}, fmt.Errorf("calibration: %w", err)
			}
			telArr := telemetryArrivals(rec.Telemetry, sched)
			order := make([]int, 0, len(telArr))
			for i, a := range telArr {
				if a != NeverArrivesUs {
					order = append(order, i)
				}
			}
			sort.SliceStable(order, func(a, b int) bool { return telArr[order[a]] < telArr[order[b]] })
			next := 0
			for k := range captureUs {
				dl := sched.DeadlineUs(k)
				for ; next < len(order) && telArr[order[next]] <= dl; next++ {
					_ = flt.Add(SampleFromRow(rec.Telemetry[order[next]]))
				}
				if sched.Live(k) {
					continue
				}
				j := sched.Held(k)
				if j < 0 || float64(captureUs[k]-captureUs[j])/1000 > maxAge {
					continue
				}
				m, err := flt.Relative(captureUs[j], captureUs[k])
				if err != nil {
					continue
				}
				c, _, err := cfg.Confidence.Confidence(cam, m)
				if err != nil {
					continue
				}
				t0, t1 := rec.Truth[j], rec.Truth[k]
				co, si := math.Cos(t0.YawRad), math.Sin(t0.YawRad)
				dx, dy := t1.XM-t0.XM, t1.YM-t0.YM
				tr := [3]float64{co*dx + si*dy, -si*dx + co*dy, math.Remainder(t1.YawRad-t0.YawRad, 2*math.Pi)}
				px, err := TruthMisalignmentPx(cam, cfg.Confidence, [3]float64{m.DxM, m.DyM, m.DyawRad}, tr)
				if err != nil {
					continue
				}
				conf = append(conf, c)
				good = append(good, PxToMrad(px, cam.Fx) <= tol)
			}
		}
	}
	cal := Calibrate(conf, good, 0)
	cal.Source, cal.ToleranceMrad = "truth", tol
	return cal, nil
}
