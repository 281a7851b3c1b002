package bench

import (
	"errors"
	"fmt"
	"log/slog"
	"strings"

	"stopgap/filter"
	"stopgap/predictor"
)

// MotionSources says which sources of motion feed the replay's filter. The
// zero value is the vehicle's telemetry alone, the replay's behaviour before
// other sources existed. Each source is a field, so a row of a side-by-side
// evaluation is one value ("telemetry", "video", "telemetry+video").
type MotionSources struct {
	// NoTelemetry ignores the recording's telemetry, as for a vehicle that
	// sends none (a camera-only retrofit).
	NoTelemetry bool `json:"no_telemetry,omitempty"`
	// Video adds the ego-motion estimated from every real frame that
	// reaches the operator's side (predictor.EgoMotion, against the frame
	// that arrived before it) as filter samples, at the frame's arrival.
	Video bool `json:"video,omitempty"`
}

// Motion source names, as String writes them and ParseMotionSources reads
// them.
const (
	motionNameTelemetry = "telemetry"
	motionNameVideo     = "video"
	motionNameNone      = "none"
)

// String names the sources joined by "+" in a fixed order, or "none".
func (m MotionSources) String() string {
	var parts []string
	if !m.NoTelemetry {
		parts = append(parts, motionNameTelemetry)
	}
	if m.Video {
		parts = append(parts, motionNameVideo)
	}
	if len(parts) == 0 {
		return motionNameNone
	}
	return strings.Join(parts, "+")
}

// ParseMotionSources reads the names String writes: "telemetry", "video",
// joined by "+" or "," in any order, or "none" (case-insensitive, spaces
// ignored). An unknown or repeated name is an error wrapping ErrReplayInput.
func ParseMotionSources(s string) (MotionSources, error) {
	m := MotionSources{NoTelemetry: true}
	t := strings.ToLower(strings.TrimSpace(s))
	if t == motionNameNone {
		return m, nil
	}
	seen := map[string]bool{}
	for _, f := range strings.FieldsFunc(t, func(r rune) bool { return r == '+' || r == ',' }) {
		name := strings.TrimSpace(f)
		if seen[name] {
			return MotionSources{}, fmt.Errorf("motion sources %q name %q twice: %w", s, name, ErrReplayInput)
		}
		seen[name] = true
		switch name {
		case motionNameTelemetry:
			m.NoTelemetry = false
		case motionNameVideo:
			m.Video = true
		default:
			return MotionSources{}, fmt.Errorf("motion sources %q: unknown source %q (use %q, %q, both joined by \"+\", or %q): %w",
				s, name, motionNameTelemetry, motionNameVideo, motionNameNone, ErrReplayInput)
		}
	}
	if len(seen) == 0 {
		return MotionSources{}, fmt.Errorf("motion sources %q name no source (use %q, %q, both joined by \"+\", or %q): %w",
			s, motionNameTelemetry, motionNameVideo, motionNameNone, ErrReplayInput)
	}
	return m, nil
}

// videoMotion feeds the filter with the video's ego-motion of each real
// frame as it arrives (MotionSources.Video).
type videoMotion struct {
	ego     *predictor.EgoMotion
	samples int // estimates the filter accepted
}

func newVideoMotion(cam predictor.Camera) (*videoMotion, error) {
	ego, err := predictor.NewEgoMotion(predictor.EgoMotionConfig{Camera: cam, Seed: 1})
	if err != nil {
		return nil, fmt.Errorf("video ego-motion: %w", err)
	}
	return &videoMotion{ego: ego}, nil
}

// observe estimates the motion between the previous frame observed and
// frame i (captured at captureUs) and adds it to flt. A frame captured
// before the previous one (reordered) is skipped: the estimator pairs frames
// in capture order. An estimate the filter rejects is logged and dropped.
func (v *videoMotion) observe(i int, captureUs int64, frames frameGetter, flt *filter.Filter, log *slog.Logger) error {
	img, err := frames.Get(i)
	if err != nil {
		return err
	}
	est, ok, err := v.ego.Observe(img, captureUs)
	if errors.Is(err, predictor.ErrTimeOrder) {
		return nil
	}
	if err != nil {
		return fmt.Errorf("video ego-motion of frame %d: %w", i, err)
	}
	if !ok {
		return nil
	}
	if err := flt.Add(est.Sample()); err != nil {
		log.Debug("video ego-motion sample rejected", "frame", i, "err", err)
		return nil
	}
	v.samples++
	return nil
}

// Close frees the estimator.
func (v *videoMotion) Close() { v.ego.Close() }
