package bench

import (
	"encoding/json"
	"math"
	"strconv"

	"stopgap/internal/display"
	"stopgap/internal/lossmodel"
)

// Method is a way of filling a display tick whose real frame is missing.
// The zero value is MethodInvalid.
type Method int

const (
	// MethodInvalid is the zero value; it is never valid.
	MethodInvalid Method = iota
	// MethodHold repeats the last real frame unchanged.
	MethodHold
	// MethodRotation warps the last real frame with the camera rotation
	// only (far-scene homography K R K^-1).
	MethodRotation
	// MethodPredicted is the tool's predicted frame: ground-plane
	// homography below the horizon, rotation above.
	MethodPredicted
)

// numMethods is the number of valid Method values.
const numMethods = 3

var methodNames = [...]string{"invalid", "hold", "rotation", "predicted"}

// String returns "hold", "rotation", "predicted", or "invalid".
func (m Method) String() string {
	if m < 0 || int(m) >= len(methodNames) {
		return "invalid"
	}
	return methodNames[m]
}

// Methods returns the valid methods in report order (a new slice).
func Methods() []Method { return []Method{MethodHold, MethodRotation, MethodPredicted} }

// Display states of a tick as written in TickRow.State: the names of the
// one frame-state type, display.State.
var (
	TickLive      = display.StateLive.String()
	TickPredicted = display.StatePredicted.String()
	TickStale     = display.StateStale.String()
	// TickNoPicture: a tick before any real frame (nothing to score).
	TickNoPicture = display.StateNoPicture.String()
	// TickNotShown: a tick the display could not fill (the newest frame
	// was captured after the tick's time).
	TickNotShown = display.StateNotShown.String()
)

// AgeBucket is a half-open range [MinMs, MaxMs) of picture age (time since the
// capture of the newest real frame shown or warped), in milliseconds.
type AgeBucket struct {
	Label string  // e.g. "100-200"
	MinMs float64 // inclusive
	MaxMs float64 // exclusive; +Inf for the last bucket
}

// AgeBuckets returns the report's gap-age buckets (a new slice):
// [0,100), [100,200), [200,400) and [400,+Inf) ms.
func AgeBuckets() []AgeBucket {
	return []AgeBucket{
		{"0-100", 0, 100}, {"100-200", 100, 200}, {"200-400", 200, 400}, {"400+", 400, math.Inf(1)},
	}
}

// numBuckets is len(AgeBuckets()).
const numBuckets = 4

// BucketIndex returns the index in AgeBuckets of the bucket holding ageMs,
// or -1 for a negative or NaN age.
func BucketIndex(ageMs float64) int {
	switch {
	case !(ageMs >= 0):
		return -1
	case ageMs < 100:
		return 0
	case ageMs < 200:
		return 1
	case ageMs < 400:
		return 2
	}
	return 3
}

// Float is a float64 that is written to JSON as null when it is NaN or
// infinite (JSON has no such numbers); null means "no data" and is read
// back as NaN.
type Float float64

// MarshalJSON implements json.Marshaler.
func (f Float) MarshalJSON() ([]byte, error) {
	v := float64(f)
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return []byte("null"), nil
	}
	return strconv.AppendFloat(nil, v, 'g', -1, 64), nil
}

// UnmarshalJSON implements json.Unmarshaler.
func (f *Float) UnmarshalJSON(b []byte) error {
	if string(b) == "null" {
		*f = Float(math.NaN())
		return nil
	}
	var v float64
	if err := json.Unmarshal(b, &v); err != nil {
		return err
	}
	*f = Float(v)
	return nil
}

// Summary is the content of summary.json. Counts cover all ticks; the
// method statistics cover only ticks on which that method was scored.
// Means and quantiles of empty sets are NaN (null in JSON). PSNR values
// are capped at PSNRCapDB before averaging (identical frames have
// infinite PSNR). Quantiles use gonum's stat.Quantile with
// stat.Empirical: the smallest sample whose empirical CDF is >= p, no
// interpolation.
type Summary struct {
	// Drive names the replayed recording (directory or label).
	Drive string `json:"drive"`
	// Cutoff is the confidence cutoff of the PREDICTED/STALE decision.
	Cutoff float64 `json:"cutoff"`
	// MaxAgeMs is the policy's cap on the picture age for PREDICTED frames.
	MaxAgeMs float64 `json:"max_age_ms"`
	// Loss is the simulated link, or only Model lossmodel.Recorded
	// ("recorded") when the arrivals came from a recorded file instead
	// (see ArrivalsFile).
	Loss lossmodel.Config `json:"loss"`
	// ArrivalsFile is the recorded arrivals file used instead of a
	// simulated link, or "".
	ArrivalsFile string `json:"arrivals_file"`
	// AllowanceMs is the display clock's jitter allowance: how long after
	// its nominal arrival a frame may still be shown as LIVE.
	AllowanceMs float64 `json:"allowance_ms"`
	// LatencyMs is the display latency behind capture used by the replay
	// schedule.
	LatencyMs float64 `json:"latency_ms"`
	// FilterModel names the motion model of the filter (e.g. "ctrv").
	FilterModel string `json:"filter_model"`
	// TelemetryRejected counts telemetry samples the filter rejected.
	TelemetryRejected int `json:"telemetry_rejected"`
	// Motion is the replay's sources of motion (telemetry, video).
	Motion MotionSources `json:"motion"`
	// VideoSamples counts the ego-motion estimates from the video that the
	// filter took (with Motion.Video).
	VideoSamples int `json:"video_samples"`
	// Lead scores latency compensation on the LIVE ticks; nil unless
	// ReplayConfig.Lead.
	Lead *LeadSummary `json:"lead,omitempty"`
	// Commands says whether the operator's commands drove the motion model
	// and with which actuator model.
	Commands CommandsUse `json:"commands"`

	TicksTotal     int `json:"ticks_total"`      // display ticks replayed
	TicksMissing   int `json:"ticks_missing"`    // ticks without a real frame (all but LIVE)
	PredictedTicks int `json:"predicted_ticks"`  // ticks shown as PREDICTED
	StaleTicks     int `json:"stale_ticks"`      // ticks shown as STALE
	LiveTicks      int `json:"live_ticks"`       // ticks shown as LIVE
	NoPictureTicks int `json:"no_picture_ticks"` // ticks before any real frame (NO_PICTURE)
	NotShownTicks  int `json:"not_shown_ticks"`  // ticks the display could not fill (NOT_SHOWN)

	SynthMsP50  Float `json:"synth_ms_p50"`  // median time to synthesise a frame, ms
	SynthMsP99  Float `json:"synth_ms_p99"`  // 99th percentile of the same, ms
	SynthMsMean Float `json:"synth_ms_mean"` // mean of the same, ms

	// LabelPixelShareMean is the mean share of pixels covered by the
	// synthetic/stale label over ticks that report it.
	LabelPixelShareMean Float `json:"label_pixel_share_mean"`
	// UnfilledShareMean is the mean share of neutral-fill pixels (no
	// source pixel) over ticks that report it.
	UnfilledShareMean Float `json:"unfilled_share_mean"`
	// PSNRCapDB is the cap applied to PSNR before averaging.
	PSNRCapDB float64 `json:"psnr_cap_db"`

	// Methods holds the per-method statistics.
	Methods MethodSet `json:"methods"`

	// TicksUnscored counts missing ticks that could not be scored (no
	// true frame, or before the first real frame); UnscoredNote says so in
	// one line with how to get them scored ("" when every one was).
	TicksUnscored int    `json:"ticks_unscored"`
	UnscoredNote  string `json:"unscored_note,omitempty"`
	// Pairing describes the pairing of a live session with the onboard
	// recording and the comparison with the relay's recorded decisions;
	// nil when neither applies.
	Pairing *PairingReport `json:"pairing,omitempty"`
	// PredictedOnly scores PREDICTED ticks alone, with the harm rates.
	PredictedOnly PredictedOnly `json:"predicted_only"`
	// Telemetry is how telemetry reached the filter when telemetry.csv
	// had no arrival times.
	Telemetry TelemetryLink `json:"telemetry"`
	// Calibration compares the confidence with the misalignment measured
	// from the images; CalibrationTruth with the exact one from truth.csv
	// (Frames 0 without truth).
	Calibration      Calibration `json:"calibration"`
	CalibrationTruth Calibration `json:"calibration_truth"`
	// Marks scores the marks of things that moved; nil unless the drive
	// has masks of its moving road users (simdrive --traffic).
	Marks *MarkSummary `json:"marks,omitempty"`
}

// MethodSet holds one MethodStats per Method under fixed JSON keys.
type MethodSet struct {
	Hold      MethodStats `json:"hold"`
	Rotation  MethodStats `json:"rotation"`
	Predicted MethodStats `json:"predicted"`
	// Shown repeats Predicted under its clear name: what the operator saw
	// on missing ticks (the predicted frame when PREDICTED, the held frame
	// when STALE). "predicted" is kept for existing readers.
	Shown MethodStats `json:"shown"`
}

// Get returns a pointer to the statistics of m, or nil for an invalid m.
func (s *MethodSet) Get(m Method) *MethodStats {
	switch m {
	case MethodHold:
		return &s.Hold
	case MethodRotation:
		return &s.Rotation
	case MethodPredicted:
		return &s.Predicted
	}
	return nil
}

// MethodStats are the scores of one method against the true frames.
type MethodStats struct {
	Frames     int           `json:"frames"`       // scored ticks
	PSNRdBMean Float         `json:"psnr_db_mean"` // capped at PSNRCapDB per frame
	SSIMMean   Float         `json:"ssim_mean"`
	MAEMean    Float         `json:"mae_mean"` // 8-bit luma levels
	Buckets    []BucketStats `json:"buckets"`  // one per AgeBuckets entry, in order
}

// BucketStats are MethodStats restricted to one gap-age bucket.
type BucketStats struct {
	Bucket     string  `json:"bucket"` // AgeBucket.Label
	MinMs      float64 `json:"min_ms"`
	MaxMs      Float   `json:"max_ms"` // null for the open last bucket
	Frames     int     `json:"frames"`
	AgeMsMean  Float   `json:"age_ms_mean"`
	PSNRdBMean Float   `json:"psnr_db_mean"`
	SSIMMean   Float   `json:"ssim_mean"`
	MAEMean    Float   `json:"mae_mean"`
}

// cap returns the PSNR cap in effect for s.
func (s Summary) cap() float64 {
	if s.PSNRCapDB > 0 {
		return s.PSNRCapDB
	}
	return PSNRCapDB
}
