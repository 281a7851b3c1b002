package bench

import (
	"fmt"
	"math"
	"math/rand/v2"
)

// DefaultCalibrationBins is the number of equal-width confidence bins of the
// reliability diagram and the expected calibration error.
const DefaultCalibrationBins = 10

// HarmPSNRMarginDB and HarmSSIMMargin define a harmful PREDICTED tick: one
// whose predicted frame scored worse than simply holding the last real frame
// by more than 1 dB PSNR (HarmRatePSNR), or by more than 0.01 SSIM
// (HarmRateSSIM). Design choices of this project: 1 dB is about the smallest
// PSNR difference commonly reported as visible (from memory, common
// practice); 0.01 SSIM is well above the metric's noise on our test drives.
const (
	HarmPSNRMarginDB = 1.0
	HarmSSIMMargin   = 0.01
)

// Harmful reports whether a shown prediction with scores pred was worse
// than hold by PSNR (capped, see CapPSNR) or by SSIM, by the margins above.
func Harmful(pred, hold Scores) (byPSNR, bySSIM bool) {
	byPSNR = CapPSNR(pred.PSNRdB) < CapPSNR(hold.PSNRdB)-HarmPSNRMarginDB
	bySSIM = pred.SSIM < hold.SSIM-HarmSSIMMargin
	return
}

// PredictedOnly are the scores over PREDICTED ticks alone (the "predicted"
// method also counts STALE ticks, where it equals hold), with the scores of
// hold over the same ticks and the harm rates. Empty sets give NaN (null).
type PredictedOnly struct {
	Frames         int   `json:"frames"`            // scored PREDICTED ticks
	PSNRdBMean     Float `json:"psnr_db_mean"`      // predicted frame, capped per frame
	SSIMMean       Float `json:"ssim_mean"`         // predicted frame
	MAEMean        Float `json:"mae_mean"`          // predicted frame, 8-bit luma levels
	HoldPSNRdBMean Float `json:"hold_psnr_db_mean"` // hold on the same ticks
	HoldSSIMMean   Float `json:"hold_ssim_mean"`    // hold on the same ticks
	HarmPSNR       int   `json:"harm_psnr"`         // ticks worse than hold by > HarmPSNRMarginDB
	HarmSSIM       int   `json:"harm_ssim"`         // ticks worse than hold by > HarmSSIMMargin SSIM
	HarmRatePSNR   Float `json:"harm_rate_psnr"`    // HarmPSNR / Frames
	HarmRateSSIM   Float `json:"harm_rate_ssim"`    // HarmSSIM / Frames
}

// CalibrationBin is one bar of the reliability diagram.
type CalibrationBin struct {
	Lo       float64 `json:"lo"` // confidence range [Lo, Hi) ([Lo, Hi] for the last bin)
	Hi       float64 `json:"hi"`
	Frames   int     `json:"frames"`              // ticks whose confidence fell in the bin
	ConfMean Float   `json:"confidence_mean"`     // mean confidence of those ticks
	Observed Float   `json:"observed_good_share"` // share of those ticks that met the criterion
}

// Calibration compares the confidence, a stated probability that the
// misalignment is within ToleranceMrad, with what happened. Ticks count
// when a confidence was computed and the misalignment was measured.
//
//	ECE   = Σ_b (n_b / N) · |mean confidence_b − observed share_b|   (equal-width bins)
//	Brier = (1/N) Σ_i (confidence_i − good_i)²
//
// (Guo, Pleiss, Sun and Weinberger 2017 for the ECE; Brier 1950.)
type Calibration struct {
	// Source says which misalignment decided "good": "images" (measured
	// from the predicted and true frames, any recording) or "truth"
	// (truth.csv poses, simulated drives).
	Source        string           `json:"source"`
	ToleranceMrad float64          `json:"tolerance_mrad"`
	Frames        int              `json:"frames"`
	GoodShare     Float            `json:"good_share"`
	ConfMean      Float            `json:"confidence_mean"`
	ECE           Float            `json:"ece"`
	Brier         Float            `json:"brier"`
	Bins          []CalibrationBin `json:"bins"`
}

// Calibrate computes the calibration of confidences conf against outcomes
// good with nBins equal-width bins (0 means DefaultCalibrationBins). The
// two slices must have the same length; it panics otherwise (caller bug).
// NaN confidences are skipped.
func Calibrate(conf []float64, good []bool, nBins int) Calibration {
	if len(conf) != len(good) {
		panic(fmt.Sprintf("bench.Calibrate: %d confidences, %d outcomes", len(conf), len(good)))
	}
	if nBins <= 0 {
		nBins = DefaultCalibrationBins
	}
	type acc struct {
		n       int
		c, good float64
	}
	bins := make([]acc, nBins)
	var n int
	var brier, sumC, sumG float64
	for i, c := range conf {
		if math.IsNaN(c) {
			continue
		}
		g := 0.0
		if good[i] {
			g = 1
		}
		b := int(c * float64(nBins))
		b = max(0, min(b, nBins-1))
		bins[b].n++
		bins[b].c += c
		bins[b].good += g
		n++
		brier += (c - g) * (c - g)
		sumC += c
		sumG += g
	}
	out := Calibration{Frames: n, ECE: Float(math.NaN()), Brier: Float(math.NaN()),
		GoodShare: Float(math.NaN()), ConfMean: Float(math.NaN())}
	ece := 0.0
	for i, b := range bins {
		cb := CalibrationBin{Lo: float64(i) / float64(nBins), Hi: float64(i+1) / float64(nBins), Frames: b.n,
			ConfMean: Float(math.NaN()), Observed: Float(math.NaN())}
		if b.n > 0 {
			cb.ConfMean, cb.Observed = Float(b.c/float64(b.n)), Float(b.good/float64(b.n))
			ece += float64(b.n) / float64(n) * math.Abs(float64(cb.ConfMean-cb.Observed))
		}
		out.Bins = append(out.Bins, cb)
	}
	if n > 0 {
		out.ECE, out.Brier = Float(ece), Float(brier/float64(n))
		out.GoodShare, out.ConfMean = Float(sumG/float64(n)), Float(sumC/float64(n))
	}
	return out
}

// TelemetryLink says how telemetry reaches the operator's side in a replay
// whose telemetry.csv has no recorded arrival times. The zero value is the
// default: telemetry shares the fate of the video.
type TelemetryLink struct {
	// Own, when true, models telemetry on its own channel: each sample
	// arrives with the video's nominal latency unless lost, independently,
	// with probability LossRate (small packets on a separate channel
	// usually get through when large video frames do not). When false
	// (default), a sample is delivered and lost together with the frame
	// captured just before it: during a video outage the filter learns
	// nothing new either, the conservative assumption.
	Own bool `json:"own_channel"`
	// LossRate is the share of telemetry samples lost on their own
	// channel, in [0, 1); only with Own.
	LossRate float64 `json:"loss_rate"`
	// Seed selects the loss pattern of the own channel.
	Seed uint64 `json:"seed"`
}

// Validate reports a loss rate outside [0, 1) or one set without Own.
func (l TelemetryLink) Validate() error {
	if !(l.LossRate >= 0 && l.LossRate < 1) {
		return fmt.Errorf("telemetry loss rate %v, want a value in [0, 1): %w", l.LossRate, ErrReplayInput)
	}
	if !l.Own && l.LossRate != 0 {
		return fmt.Errorf("telemetry loss rate %v given but telemetry shares the fate of the video; choose its own channel to set a loss rate: %w", l.LossRate, ErrReplayInput)
	}
	return nil
}

// ownChannelArrivals returns the arrival of each telemetry sample taken at
// timesUs on its own channel: t + latencyUs, or NeverArrivesUs with
// probability LossRate (PCG seeded with Seed, one draw per sample in order).
func (l TelemetryLink) ownChannelArrivals(timesUs []int64, latencyUs int64) []int64 {
	rng := rand.New(rand.NewPCG(l.Seed, 0x7e1e))
	out := make([]int64, len(timesUs))
	for i, t := range timesUs {
		if rng.Float64() < l.LossRate {
			out[i] = NeverArrivesUs
		} else {
			out[i] = t + latencyUs
		}
	}
	return out
}
