package predictor

import (
	"fmt"
	"image/color"
	"math"
	"strconv"

	"gocv.io/x/gocv"

	"stopgap/filter"
)

// Latency compensation ("lead", off by default): a LIVE frame is already
// old when it is shown, by the capture-to-display latency. A Leader warps it
// forward by that age to the display time, so the static scene sits where
// the vehicle is now rather than where it was. The result is synthetic, so
// it is labelled in the pixels like a predicted frame, with a look of its
// own (our own design):
//
//   - a border of diagonal cyan and black stripes running the other way from
//     the PREDICTED stripes;
//   - in the top left corner inside it a black box with cyan text
//     "MOVED AHEAD +<age> ms  conf <confidence>" over "real frame, shifted
//     to now".
//
// When the motion is unknown, its confidence is below the cutoff or the age
// is beyond MaxLeadMs, the real frame is shown as it is (LIVE, unlabelled).

// DefaultMaxLeadMs is the largest age a Leader moves a frame by: beyond it
// the latency is a gap, not a delay, and the frame is shown as it is. Our
// own choice, a few frame periods above a cellular link's usual latency.
const DefaultMaxLeadMs = 300

var (
	leadBGR  = [3]byte{255, 220, 0} // cyan, BGR
	leadText = color.RGBA{R: 0, G: 220, B: 255, A: 255}
)

// LeadConfig configures a Leader.
type LeadConfig struct {
	// Camera of the video; frames must be Width x Height CV_8UC3 (BGR).
	Camera Camera
	// Motion gives the vehicle motion from capture to display; required.
	Motion MotionSource
	// Confidence turns the motion's covariance into a confidence; zero =
	// defaults.
	Confidence ConfidenceModel
	// CutoffConfidence: below it the frame is not moved. Use the
	// operator's PREDICTED cutoff; 0 is refused (it would move frames on
	// any motion at all).
	CutoffConfidence float64
	// MaxLeadMs caps the age a frame is moved by; 0 means DefaultMaxLeadMs.
	MaxLeadMs float64
}

// LeadTick reports what a Leader did with one LIVE frame.
type LeadTick struct {
	// Moved is true when dst holds the frame moved ahead and labelled;
	// false when dst holds the real frame unchanged.
	Moved bool
	// AgeMs is the frame's age at display, (displayUs - captureUs)/1000.
	AgeMs float64
	// Confidence and SigmaPx of the motion over the age (ConfidenceModel);
	// 0 when the motion was unusable.
	Confidence, SigmaPx float64
	// Motion from capture to display; MotionErr says why none was usable.
	Motion    filter.Motion
	MotionErr error
	// LabelFraction of the pixels the label overwrote (0 unless Moved).
	LabelFraction float64
}

// Leader moves LIVE frames forward by their age. Buffers: it owns its warp
// scratch and label pattern (Close frees them); dst and Unlabelled belong
// to the caller and are allocated only when their size or type differ from
// the camera's. Not safe for concurrent use.
type Leader struct {
	// Unlabelled, when non-nil, receives the moved frame before labelling
	// (only when Moved). Used for scoring.
	Unlabelled *gocv.Mat

	cfg     LeadConfig
	synth   *Synthesizer
	label   *Labeler
	pattern gocv.Mat
	text    [96]byte
	closed  bool
}

// NewLeader validates cfg and allocates the buffers.
func NewLeader(cfg LeadConfig) (*Leader, error) {
	if cfg.Motion == nil {
		return nil, fmt.Errorf("LeadConfig.Motion is nil; pass the motion filter: %w", ErrInvalidConfig)
	}
	if !(cfg.CutoffConfidence > 0 && cfg.CutoffConfidence <= 1) {
		return nil, fmt.Errorf("lead cutoff %v, want a confidence in (0, 1]: %w", cfg.CutoffConfidence, ErrInvalidConfig)
	}
	if !(cfg.MaxLeadMs >= 0) || math.IsInf(cfg.MaxLeadMs, 0) {
		return nil, fmt.Errorf("lead MaxLeadMs %v, want a finite age >= 0 ms: %w", cfg.MaxLeadMs, ErrInvalidConfig)
	}
	if cfg.MaxLeadMs == 0 {
		cfg.MaxLeadMs = DefaultMaxLeadMs
	}
	if err := cfg.Confidence.Validate(); err != nil {
		return nil, err
	}
	synth, err := NewSynthesizer(cfg.Camera, SynthOptions{})
	if err != nil {
		return nil, err
	}
	label, err := NewLabeler(cfg.Camera.Width, cfg.Camera.Height)
	if err != nil {
		synth.Close()
		return nil, err
	}
	l := &Leader{cfg: cfg, synth: synth, label: label}
	w, h := cfg.Camera.Width, cfg.Camera.Height
	l.pattern = gocv.NewMatWithSize(h, w, gocv.MatTypeCV8UC3)
	p, err := l.pattern.DataPtrUint8()
	if err != nil {
		l.Close()
		return nil, err
	}
	half := max(3, 2*label.bw/3)
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			c := stripeDark
			if ((x-y+h)/half)%2 == 0 { // against the PREDICTED stripes' (x+y)
				c = leadBGR
			}
			i := 3 * (y*w + x)
			p[i], p[i+1], p[i+2] = c[0], c[1], c[2]
		}
	}
	return l, nil
}

// Close frees the buffers. Safe to call more than once.
func (l *Leader) Close() error {
	if l.closed {
		return nil
	}
	l.closed = true
	l.synth.Close()
	l.label.Close()
	l.pattern.Close()
	return nil
}

// Lead writes to dst the LIVE frame captured at captureUs as it should be
// shown at displayUs (both on the vehicle clock): moved ahead by the
// motion between the two and labelled, or unchanged (see the type doc for
// when). displayUs before captureUs is an error.
func (l *Leader) Lead(frame gocv.Mat, captureUs, displayUs int64, dst *gocv.Mat) (LeadTick, error) {
	var tick LeadTick
	if l.closed {
		return tick, ErrClosed
	}
	c := l.cfg.Camera
	if err := checkFrame("live frame", &frame, c.Width, c.Height); err != nil {
		return tick, err
	}
	if !matUsable(dst) {
		return tick, fmt.Errorf("destination is nil or a zero gocv.Mat; create it with gocv.NewMat(): %w", ErrFrameFormat)
	}
	if displayUs < captureUs {
		return tick, fmt.Errorf("display at %d us before capture at %d us: %w", displayUs, captureUs, ErrTargetBeforeFrame)
	}
	tick.AgeMs = float64(displayUs-captureUs) / 1000
	m, err := l.cfg.Motion.Relative(captureUs, displayUs)
	if err == nil {
		tick.Motion = m
		tick.Confidence, tick.SigmaPx, err = l.cfg.Confidence.Confidence(c, m)
	}
	if err != nil {
		tick.MotionErr = fmt.Errorf("motion %d..%d us: %w", captureUs, displayUs, err)
		tick.Confidence, tick.SigmaPx = 0, 0
	}
	if tick.MotionErr != nil || tick.Confidence < l.cfg.CutoffConfidence || tick.AgeMs > l.cfg.MaxLeadMs || tick.AgeMs == 0 {
		frame.CopyTo(dst)
		return tick, nil
	}
	if _, err := l.synth.Synthesize(frame, m, dst); err != nil {
		return tick, err
	}
	if l.Unlabelled != nil {
		if !matUsable(l.Unlabelled) {
			return tick, fmt.Errorf("Leader.Unlabelled is a zero gocv.Mat; create it with gocv.NewMat(): %w", ErrFrameFormat)
		}
		dst.CopyTo(l.Unlabelled)
	}
	tick.Moved = true
	tick.LabelFraction = l.draw(dst, tick.AgeMs, tick.Confidence)
	return tick, nil
}

// draw labels a moved frame (see the type doc) and returns the label's
// pixel share.
func (l *Leader) draw(img *gocv.Mat, ageMs, confidence float64) float64 {
	lb := l.label
	for _, r := range lb.borderRects() {
		src := l.pattern.Region(r)
		dst := img.Region(r)
		src.CopyTo(&dst)
		src.Close()
		dst.Close()
	}
	t := append(l.text[:0], "MOVED AHEAD +"...)
	t = strconv.AppendInt(t, int64(math.Round(ageMs)), 10)
	t = append(t, " ms  conf "...)
	t = strconv.AppendFloat(t, confidence, 'f', 2, 64)
	covered := lb.borderArea() + lb.box(img, false, black, leadText, bytesString(t), "real frame, shifted to now")
	return float64(covered) / float64(lb.w*lb.h)
}
