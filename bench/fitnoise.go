package bench

import (
	"context"
	"fmt"
	"math"
	"path/filepath"

	"stopgap/filter"
	"stopgap/stream/recording"
)

// noiseFitHorizonsMs are the gap lengths over which FitTurnNoise scores the
// filter's predictions: one to twelve frames at 30 fps.
var noiseFitHorizonsMs = [...]float64{33, 67, 100, 200, 400}

// NoiseFit is one candidate of FitTurnNoise.
type NoiseFit struct {
	// The candidate's gap noise settings (see filter.Config).
	GapYawAccelNoiseRps2 float64 `json:"gap_yaw_accel_noise_rps2"`
	TurnAdaptGain        float64 `json:"turn_adapt_gain"`
	TurnAdaptWindowUs    int64   `json:"turn_adapt_window_us"`
	// NLL is the mean negative log-likelihood per prediction of the true
	// heading change under the filter's Gaussian prediction.
	NLL float64 `json:"nll"`
	// Predictions is the number of (gap start, horizon) pairs scored.
	Predictions int `json:"predictions"`
}

// FitTurnNoise fits the filter's gap noise (filter.Config
// GapYawAccelNoiseRps2, TurnAdaptGain and TurnAdaptWindowUs) to recorded
// drives with a truth.csv by
// maximising the likelihood of the true heading change over gaps: for every
// frame and each horizon h of 33, 67, 100, 200 and 400 ms the filter, fed
// with the telemetry up to the frame only (as when telemetry is lost with
// the video), predicts the motion over h with filter.Relative, and the
// log-density of the true heading change under N(prediction, variance) is
// summed:
//
//	NLL = ½ (e²/σ² + ln σ² + ln 2π),  e = true dyaw − predicted dyaw.
//
// This is the innovation likelihood of the heading at the end of the gap:
// the heading error dominates the misalignment the confidence is about
// (the 3-D likelihood of (dx, dy, dyaw) is dominated instead by its
// near-degenerate lateral direction, which moves pixels little). Every
// candidate configuration is tried; it returns the fit of each and the
// index of the best (lowest NLL).
func FitTurnNoise(ctx context.Context, drives []string, candidates []filter.Config) (fits []NoiseFit, best int, err error) {
	if len(drives) == 0 || len(candidates) == 0 {
		return nil, -1, fmt.Errorf("fit: no drives or no candidate noise values: %w", ErrReplayInput)
	}
	recs := make([]*recording.Recording, len(drives))
	for i, d := range drives {
		r, err := recording.Open(d)
		if err != nil {
			return nil, -1, fmt.Errorf("fit: %w", err)
		}
		if len(r.Truth) < 2 {
			return nil, -1, fmt.Errorf("fit: %s has no usable truth.csv (needed to fit the noise): %w", filepath.Join(d, recording.TruthFile), ErrReplayInput)
		}
		recs[i] = r
	}
	best = -1
	for _, cfg := range candidates {
		if err := ctx.Err(); err != nil {
			return nil, -1, err
		}
		if cfg.Model == filter.ModelInvalid {
			cfg.Model = filter.ModelCTRV
		}
		probe, err := filter.New(cfg)
		if err != nil {
			return nil, -1, fmt.Errorf("fit: candidate: %w", err)
		}
		eff := probe.Config()
		fit := NoiseFit{GapYawAccelNoiseRps2: eff.GapYawAccelNoiseRps2, TurnAdaptGain: eff.TurnAdaptGain, TurnAdaptWindowUs: eff.TurnAdaptWindowUs}
		sum := 0.0
		for _, r := range recs {
			s, n, err := driveNLL(r, cfg)
			if err != nil {
				return nil, -1, err
			}
			sum += s
			fit.Predictions += n
		}
		fit.NLL = sum / float64(max(fit.Predictions, 1))
		fits = append(fits, fit)
		if best < 0 || fit.NLL < fits[best].NLL {
			best = len(fits) - 1
		}
	}
	return fits, best, nil
}

// driveNLL returns the summed NLL and the number of predictions on one
// drive (see FitTurnNoise).
func driveNLL(r *recording.Recording, cfg filter.Config) (float64, int, error) {
	f, err := filter.New(cfg)
	if err != nil {
		return 0, 0, fmt.Errorf("fit: %w", err)
	}
	truthAt := func(us int64) (recording.Truth, bool) {
		// Truth rows are per frame; find the frame at exactly us.
		lo, hi := 0, len(r.Truth)
		for lo < hi {
			m := (lo + hi) / 2
			if r.Truth[m].CaptureUs < us {
				lo = m + 1
			} else {
				hi = m
			}
		}
		if lo < len(r.Truth) && r.Truth[lo].CaptureUs == us {
			return r.Truth[lo], true
		}
		return recording.Truth{}, false
	}
	next, sum, n := 0, 0.0, 0
	for i, t0 := range r.Truth {
		for ; next < len(r.Telemetry) && r.Telemetry[next].TimeUs <= t0.CaptureUs; next++ {
			_ = f.Add(SampleFromRow(r.Telemetry[next])) // rejected samples are counted by the filter
		}
		for _, hMs := range noiseFitHorizonsMs {
			// The horizon in whole frames, so that the truth is exact.
			j := i + int(math.Round(hMs/1000*frameRate(r)))
			if j <= i || j >= len(r.Truth) {
				continue
			}
			t1, ok := truthAt(r.Truth[j].CaptureUs)
			if !ok {
				continue
			}
			m, err := f.Relative(t0.CaptureUs, t1.CaptureUs)
			if err != nil {
				continue
			}
			c, s := math.Cos(t0.YawRad), math.Sin(t0.YawRad)
			dx, dy := t1.XM-t0.XM, t1.YM-t0.YM
			e := []float64{c*dx + s*dy - m.DxM, -s*dx + c*dy - m.DyM, math.Remainder(t1.YawRad-t0.YawRad-m.DyawRad, 2*math.Pi)}
			v := m.Cov[2][2] + 1e-12
			sum += 0.5 * (e[2]*e[2]/v + math.Log(v) + math.Log(2*math.Pi))
			n++
		}
	}
	return sum, n, nil
}

// frameRate returns the recording's mean frame rate, frames per second.
func frameRate(r *recording.Recording) float64 {
	n := len(r.Frames)
	if n < 2 {
		return 30
	}
	return float64(n-1) / (float64(r.Frames[n-1].CaptureUs-r.Frames[0].CaptureUs) * 1e-6)
}
