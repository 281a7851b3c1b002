package predictor

import (
	"fmt"
	"math"

	"time"

	"gocv.io/x/gocv"

	"stopgap/filter"
)

// FillerConfig configures a Filler.
type FillerConfig struct {
	// Camera of the video; frames must be Width x Height CV_8UC3 (BGR).
	Camera Camera
	// Policy decides PREDICTED versus STALE. Its zero value never predicts;
	// use DefaultPolicy() for the documented defaults.
	Policy Policy
	// Motion gives the vehicle motion over a gap (usually *filter.Filter).
	// Required.
	Motion MotionSource
	// Confidence turns motion covariance into confidence; zero = defaults.
	Confidence ConfidenceModel
	// Synth configures the warp; zero = defaults.
	Synth SynthOptions
	// FarDepth configures the far-scene depth estimate from the two newest
	// real frames (see FarDepthEstimator); zero = defaults, Off = the far
	// scene is always at infinity (rotation only).
	FarDepth FarDepthOptions
	// Upright configures the upright-structure estimate from the two newest
	// real frames (see UprightEstimator); zero = defaults, Off = road and
	// far planes only.
	Upright UprightOptions
	// Movers configures the marks where things moved on their own between
	// the two newest real frames (see MoverDetector); zero = defaults, Off =
	// no marks. Marks are drawn on PREDICTED ground-method frames only, after
	// the label; they do not change the confidence.
	Movers MoverOptions
}

// Tick reports what the Filler put on screen for one display tick.
type Tick struct {
	State  State
	Method Method
	// TargetUs is the vehicle-clock time the displayed frame stands for;
	// CaptureUs the capture time of the real frame it was made from.
	TargetUs, CaptureUs int64
	// AgeMs = (TargetUs - CaptureUs) / 1000: how old the real picture is.
	AgeMs float64
	// Confidence in [0, 1] and the worst 1-sigma pixel error behind it
	// (ConfidenceModel). 1 and 0 for LIVE; 0 when the motion was unusable.
	Confidence, SigmaPx float64
	// UnfilledFraction of the output pixels had no source (PREDICTED only).
	UnfilledFraction float64
	// LabelFraction of the output pixels was overwritten by the label
	// (border and text box; 0 for LIVE).
	LabelFraction float64
	// SynthDuration is the time spent producing the output image (warp or
	// desaturation, label, copies), measured with Filler.Now.
	SynthDuration time.Duration
	// Motion is the motion from CaptureUs to TargetUs used for the tick.
	Motion filter.Motion
	// MotionErr is why no usable motion was available, if so; the tick is
	// then STALE with confidence 0 (not a failure of the call).
	MotionErr error
	// FarDepthM is the far-scene depth a PREDICTED ground-method frame was
	// made with, metres; +Inf for rotation only (also when no estimate
	// could be made), 0 when not applicable.
	FarDepthM float64
	// UprightSegments is the number of upright segments a PREDICTED
	// ground-method frame was composited with (see UprightModel).
	UprightSegments int
	// Movers is the number of mover marks drawn on a PREDICTED frame.
	Movers int
}

// Filler is the per-tick gap filler shared by the offline replay and the
// live relay. It keeps a copy of the last real frame and, for each display
// tick, either passes a real frame through unlabelled (LIVE) or fills the gap
// with a labelled PREDICTED or STALE frame.
//
// Buffers: the Filler owns the copy of the last real frame and its scratch
// images (Close frees them). Every dst and Unlabelled is owned by the caller;
// they are allocated only when their size or type differ from the camera's,
// so reusing them makes the per-tick path allocation-free in OpenCV. Every
// frame handed in (Live, Hold, HoldPrevious) is copied, so the caller may
// reuse it at once; a caller that keeps real frames in another form may
// hand them over later, with Hold, in capture order, as long as it does so
// before the next gap tick (the relay converts frames that passed through
// only when a gap needs them). Not safe for concurrent use.
type Filler struct {
	// Now is the clock for Tick.SynthDuration; nil means time.Now.
	Now func() time.Time
	// Unlabelled, when non-nil, receives on every successful tick the image
	// before labelling and desaturation: the real frame (LIVE), the
	// synthesized frame (PREDICTED) or the held frame unmoved (STALE). It is
	// not written before the first real frame. Used for scoring.
	Unlabelled *gocv.Mat

	cfg    FillerConfig
	synth  *Synthesizer
	label  *Labeler
	last   gocv.Mat
	lastUs int64
	have   bool
	gray   gocv.Mat
	closed bool

	// The real frame before last (the comparison frame when no older one
	// is kept), and the far-depth estimate made for the held frame (valid
	// while farFor == lastUs).
	prev     gocv.Mat
	prevUs   int64
	havePrev bool
	depth    *FarDepthEstimator
	farDepth float64
	farFor   int64
	farKnown bool

	// The upright structure of the held frame (valid while uprightFor ==
	// lastUs).
	uprightEst   *UprightEstimator
	upright      UprightModel
	uprightFor   int64
	uprightKnown bool

	// The movers of the held frame (valid while moversFor == lastUs).
	moverDet    *MoverDetector
	movers      MoverModel
	moversFor   int64
	moversKnown bool
	// The movers as marked on the last tick (see placeMarks), reused.
	marks []Mover

	// Real frames older than prev, oldest first: older[:olderN] with
	// their capture times; buffers beyond olderN are spares. A frame
	// enters when it stops being prev (its buffer is swapped in, not
	// copied) or through HoldOlder. The movers compare the held frame
	// with the oldest within MoverOptions.BaselineMs (see
	// comparisonFrame), and so does the upright estimate.
	older   [MoverHistory]gocv.Mat
	olderUs [MoverHistory]int64
	olderN  int
	// moverUp is the unrefined upright structure the movers use.
	moverUp UprightModel
	// moversFromUs is the capture time of the frame the movers of the
	// held frame were detected against.
	moversFromUs int64
}

// NewFiller validates cfg and allocates the buffers.
func NewFiller(cfg FillerConfig) (*Filler, error) {
	if cfg.Motion == nil {
		return nil, fmt.Errorf("FillerConfig.Motion is nil; pass the *filter.Filter fed with telemetry: %w", ErrInvalidConfig)
	}
	if err := cfg.Policy.Validate(); err != nil {
		return nil, err
	}
	if err := cfg.Confidence.Validate(); err != nil {
		return nil, err
	}
	s, err := NewSynthesizer(cfg.Camera, cfg.Synth)
	if err != nil {
		return nil, err
	}
	l, err := NewLabeler(cfg.Camera.Width, cfg.Camera.Height)
	if err != nil {
		s.Close()
		return nil, err
	}
	d, err := NewFarDepthEstimator(cfg.FarDepth)
	if err != nil {
		s.Close()
		l.Close()
		return nil, err
	}
	ue, err := NewUprightEstimator(cfg.Upright)
	if err != nil {
		s.Close()
		l.Close()
		d.Close()
		return nil, err
	}
	md, err := NewMoverDetector(cfg.Movers)
	if err != nil {
		s.Close()
		l.Close()
		d.Close()
		ue.Close()
		return nil, err
	}
	return &Filler{
		cfg:        cfg,
		synth:      s,
		label:      l,
		depth:      d,
		uprightEst: ue,
		moverDet:   md,
		last:       gocv.NewMatWithSize(cfg.Camera.Height, cfg.Camera.Width, gocv.MatTypeCV8UC3),
		prev:       gocv.NewMatWithSize(cfg.Camera.Height, cfg.Camera.Width, gocv.MatTypeCV8UC3),
		gray:       gocv.NewMatWithSize(cfg.Camera.Height, cfg.Camera.Width, gocv.MatTypeCV8U),
	}, nil
}

// Close frees the Filler's buffers. Safe to call more than once.
func (f *Filler) Close() error {
	if f.closed {
		return nil
	}
	f.closed = true
	f.synth.Close()
	f.label.Close()
	f.depth.Close()
	f.uprightEst.Close()
	f.moverDet.Close()
	for i := range f.older {
		if f.older[i].Ptr() != nil {
			f.older[i].Close()
		}
	}
	f.last.Close()
	f.prev.Close()
	f.gray.Close()
	return nil
}

// SetPolicy replaces the policy for the following ticks, for example when
// the operator moves the cutoff. An invalid policy is refused and the old one
// kept.
func (f *Filler) SetPolicy(p Policy) error {
	if err := p.Validate(); err != nil {
		return err
	}
	f.cfg.Policy = p
	return nil
}

// LastCaptureUs returns the capture time of the held real frame; ok is false
// before the first one.
func (f *Filler) LastCaptureUs() (us int64, ok bool) { return f.lastUs, f.have }

func (f *Filler) now() time.Time {
	if f.Now != nil {
		return f.Now()
	}
	return time.Now()
}

// LiveTick returns the tick of a real frame captured at captureUs that is
// shown as it is: LIVE, confidence 1, age 0. Live returns it (with its
// SynthDuration); a caller that shows a real frame without the Filler (the
// relay passing the vehicle's packets through) reports it too.
func LiveTick(captureUs int64) Tick {
	return Tick{State: StateLive, TargetUs: captureUs, CaptureUs: captureUs, Confidence: 1}
}

// Live handles a real frame that arrived and is due: dst receives a copy,
// unlabelled, and the frame is remembered for later gaps unless it is older
// than the one already held (a late frame is shown but not kept). A nil dst
// receives nothing: the caller shows the frame by other means (the relay
// forwards the vehicle's own packets) and the copy would be wasted.
func (f *Filler) Live(frame gocv.Mat, captureUs int64, dst *gocv.Mat) (Tick, error) {
	tick := LiveTick(captureUs)
	if f.closed {
		return tick, ErrClosed
	}
	c := f.cfg.Camera
	if err := checkFrame("live frame", &frame, c.Width, c.Height); err != nil {
		return tick, err
	}
	if dst != nil && !matUsable(dst) {
		return tick, fmt.Errorf("destination is a zero gocv.Mat; create it with gocv.NewMat(): %w", ErrFrameFormat)
	}
	start := f.now()
	f.hold(frame, captureUs)
	if dst != nil {
		frame.CopyTo(dst)
	}
	if f.Unlabelled != nil {
		if !matUsable(f.Unlabelled) {
			return tick, fmt.Errorf("Filler.Unlabelled is a zero gocv.Mat; create it with gocv.NewMat(): %w", ErrFrameFormat)
		}
		frame.CopyTo(f.Unlabelled)
	}
	tick.SynthDuration = f.now().Sub(start)
	return tick, nil
}

// Hold keeps a real frame for later gaps without showing it: a frame that
// came after its tick was filled, or one a replay loads only when a gap
// needs it. The held frame becomes the frame before last. A frame older than
// the one held is ignored (nil error), as in Live. frame is copied, not kept.
func (f *Filler) Hold(frame gocv.Mat, captureUs int64) error {
	if f.closed {
		return ErrClosed
	}
	c := f.cfg.Camera
	if err := checkFrame("held frame", &frame, c.Width, c.Height); err != nil {
		return err
	}
	f.hold(frame, captureUs)
	return nil
}

// HoldPrevious gives the Filler the real frame before the held one (the
// far-depth, upright and mover estimates compare the held frame with it
// when no older frame is kept; see comparisonFrame) without changing
// the held frame: a replay that loads frames only when a gap needs them
// hands it the two newest it has. captureUs must be before the held frame's;
// otherwise, or before any held frame, it returns an error wrapping
// ErrTargetBeforeFrame or ErrNoFrame and changes nothing.
func (f *Filler) HoldPrevious(frame gocv.Mat, captureUs int64) error {
	if f.closed {
		return ErrClosed
	}
	if !f.have {
		return fmt.Errorf("frame before last at %d us: %w", captureUs, ErrNoFrame)
	}
	if captureUs >= f.lastUs {
		return fmt.Errorf("frame before last at %d us, held frame at %d us: %w", captureUs, f.lastUs, ErrTargetBeforeFrame)
	}
	c := f.cfg.Camera
	if err := checkFrame("frame before last", &frame, c.Width, c.Height); err != nil {
		return err
	}
	frame.CopyTo(&f.prev)
	f.prevUs, f.havePrev = captureUs, true
	// Kept older frames must be older than it (their buffers stay as
	// spares).
	for f.olderN > 0 && f.olderUs[f.olderN-1] >= captureUs {
		f.olderN--
	}
	f.moversKnown, f.uprightKnown = false, false
	return nil
}

// PreviousCaptureUs returns the capture time of the frame before the held
// one; ok is false if there is none.
func (f *Filler) PreviousCaptureUs() (us int64, ok bool) { return f.prevUs, f.havePrev }

// hold makes frame the held one if it is not older than the held one; the
// held frame becomes the frame before last.
func (f *Filler) hold(frame gocv.Mat, captureUs int64) {
	if f.have && captureUs < f.lastUs {
		return
	}
	if f.have && captureUs > f.lastUs {
		// Keep the previous real frame, and the ones before it for the
		// comparison frame (comparisonFrame): swap the buffers, so this
		// costs no extra copy.
		if f.havePrev {
			f.prev = f.pushOlder(f.prev, f.prevUs)
		}
		f.prev, f.last = f.last, f.prev
		f.prevUs, f.havePrev = f.lastUs, true
	}
	frame.CopyTo(&f.last)
	f.lastUs, f.have = captureUs, true
}

// pushOlder appends buf (a frame captured at us, newer than every kept
// older frame) to the older frames, dropping the oldest when they are
// full, and returns a spare buffer for the caller to keep in its place
// (the dropped one, a spare, or a new empty Mat the first times).
func (f *Filler) pushOlder(buf gocv.Mat, us int64) gocv.Mat {
	if f.olderN == len(f.older) {
		spare := f.older[0]
		copy(f.older[:], f.older[1:])
		copy(f.olderUs[:], f.olderUs[1:])
		f.older[len(f.older)-1], f.olderUs[len(f.older)-1] = buf, us
		return spare
	}
	spare := f.older[f.olderN]
	if spare.Ptr() == nil {
		spare = gocv.NewMat()
	}
	f.older[f.olderN], f.olderUs[f.olderN] = buf, us
	f.olderN++
	return spare
}

// HoldOlder gives the Filler a real frame older than the frame before the
// held one, for the motion evidence of the movers (MoverOptions.BaselineMs),
// as the oldest it keeps: kept frames older than it are dropped. A replay
// that loads frames only when a gap needs them hands it the frame the live
// path would compare with (see MoverFrameWanted). captureUs must be before the frame
// before last's (ErrTargetBeforeFrame otherwise, and ErrNoFrame without
// one); nothing changes on an error. frame is copied.
func (f *Filler) HoldOlder(frame gocv.Mat, captureUs int64) error {
	if f.closed {
		return ErrClosed
	}
	if !f.have || !f.havePrev {
		return fmt.Errorf("older frame at %d us without a held frame and one before it: %w", captureUs, ErrNoFrame)
	}
	if captureUs >= f.prevUs {
		return fmt.Errorf("older frame at %d us, frame before last at %d us: %w", captureUs, f.prevUs, ErrTargetBeforeFrame)
	}
	c := f.cfg.Camera
	if err := checkFrame("older frame", &frame, c.Width, c.Height); err != nil {
		return err
	}
	// Drop the kept frames not newer than it (their buffers become
	// spares beyond olderN), then insert it in time order.
	k := 0
	for k < f.olderN && f.olderUs[k] <= captureUs {
		k++
	}
	if k > 0 {
		var drop [MoverHistory]gocv.Mat
		copy(drop[:], f.older[:k])
		copy(f.older[:], f.older[k:f.olderN])
		copy(f.olderUs[:], f.olderUs[k:f.olderN])
		copy(f.older[f.olderN-k:], drop[:k])
		f.olderN -= k
	}
	f.moversKnown, f.uprightKnown = false, false
	if f.olderN == len(f.older) {
		return nil // full of newer frames: the oldest kept is newer than the baseline needs
	}
	buf := f.older[f.olderN]
	if buf.Ptr() == nil {
		buf = gocv.NewMat()
	}
	frame.CopyTo(&buf)
	copy(f.older[1:f.olderN+1], f.older[:f.olderN])
	copy(f.olderUs[1:f.olderN+1], f.olderUs[:f.olderN])
	f.older[0], f.olderUs[0] = buf, captureUs
	f.olderN++
	return nil
}

// MoverFrameWanted returns which of the capture times us (increasing, the
// real frames the display had before the frame before the held one, newest
// last) the movers would compare the held frame (captured at lastUs) with,
// as the live path keeps them: the oldest of the newest MoverHistory that
// is at most the baseline older; ok is false when none is.
func (f *Filler) MoverFrameWanted(lastUs int64, us []int64) (i int, ok bool) {
	b := f.cfg.Movers.baselineUs()
	for k := max(0, len(us)-MoverHistory); k < len(us); k++ {
		if lastUs-us[k] <= b {
			return k, true
		}
	}
	return 0, false
}

// Missing fills a tick with no real frame using MethodGround. See MissingWith.
func (f *Filler) Missing(targetUs int64, dst *gocv.Mat) (Tick, error) {
	return f.MissingWith(MethodGround, targetUs, dst)
}

// MissingWith fills a display tick at vehicle time targetUs for which no real
// frame is due-and-here:
//
//  1. age = targetUs - capture time of the held frame;
//  2. motion = Motion.Relative(capture, targetUs); confidence from its
//     covariance (a failing or invalid motion gives confidence 0 and sets
//     Tick.MotionErr);
//  3. Policy.Decide; MethodHold never yields PREDICTED;
//  4. PREDICTED: dst = held frame warped by method, labelled;
//     STALE: dst = held frame desaturated, dimmed and labelled.
//
// Before the first real frame dst receives a labelled "no picture" frame, the
// tick is StateNoPicture, and the error is ErrNoFrame. A targetUs before the held
// frame's capture time returns ErrTargetBeforeFrame and leaves dst untouched.
func (f *Filler) MissingWith(method Method, targetUs int64, dst *gocv.Mat) (Tick, error) {
	tick := Tick{Method: method, TargetUs: targetUs, CaptureUs: f.lastUs}
	if f.closed {
		return tick, ErrClosed
	}
	f.marks = f.marks[:0]
	if method != MethodGround && method != MethodRotation && method != MethodHold {
		return tick, fmt.Errorf("method %d: %w", int(method), ErrInvalidMethod)
	}
	if !matUsable(dst) {
		return tick, fmt.Errorf("destination is nil or a zero gocv.Mat; create it with gocv.NewMat(): %w", ErrFrameFormat)
	}
	if f.Unlabelled != nil && !matUsable(f.Unlabelled) {
		return tick, fmt.Errorf("Filler.Unlabelled is a zero gocv.Mat; create it with gocv.NewMat(): %w", ErrFrameFormat)
	}
	if !f.have {
		start := f.now()
		f.last.CopyTo(dst) // only to give dst the camera's size and type
		frac, err := f.label.DrawNoPicture(dst)
		if err != nil {
			return tick, err
		}
		tick.State, tick.LabelFraction = StateNoPicture, frac
		tick.SynthDuration = f.now().Sub(start)
		return tick, fmt.Errorf("gap tick at %d us: %w", targetUs, ErrNoFrame)
	}
	if targetUs < f.lastUs {
		return tick, fmt.Errorf("gap tick at %d us, held frame captured at %d us: %w", targetUs, f.lastUs, ErrTargetBeforeFrame)
	}
	tick.AgeMs = float64(targetUs-f.lastUs) / 1000
	m, err := f.cfg.Motion.Relative(f.lastUs, targetUs)
	if err == nil {
		tick.Motion = m
		tick.Confidence, tick.SigmaPx, err = f.cfg.Confidence.Confidence(f.cfg.Camera, m)
	}
	if err != nil {
		tick.MotionErr = fmt.Errorf("motion %d..%d us: %w", f.lastUs, targetUs, err)
		tick.Confidence, tick.SigmaPx = 0, 0
	}
	tick.State = f.cfg.Policy.Decide(false, tick.Confidence, tick.AgeMs)
	if method == MethodHold && tick.State == StatePredicted {
		tick.State = StateStale
	}

	start := f.now()
	var movers *MoverModel
	var up *UprightModel
	if tick.State == StatePredicted {
		var syn Synthesis
		if method == MethodRotation {
			syn, err = f.synth.SynthesizeRotation(f.last, tick.Motion, dst)
		} else {
			tick.FarDepthM = f.farDepthFor()
			up = f.uprightModel(tick.FarDepthM)
			syn, err = f.synth.SynthesizeScene(f.last, tick.Motion, tick.FarDepthM, up, dst)
			tick.UprightSegments = syn.UprightSegments
			movers = f.moverModel(tick.FarDepthM, up)
		}
		if err != nil {
			return tick, err
		}
		tick.UnfilledFraction = syn.UnfilledFraction
		if f.Unlabelled != nil {
			dst.CopyTo(f.Unlabelled)
		}
	} else {
		if f.Unlabelled != nil {
			f.last.CopyTo(f.Unlabelled)
		}
		f.desaturate(dst)
	}
	tick.LabelFraction, err = f.label.Draw(dst, tick.State, tick.AgeMs, tick.Confidence)
	if err == nil && movers != nil && len(movers.Movers) > 0 {
		f.marks = f.placeMarks(f.marks[:0], movers.Movers, tick.Motion, tick.FarDepthM, up)
		tick.Movers, err = f.label.DrawMovers(dst, f.marks, tick.AgeMs)
	}
	tick.SynthDuration = f.now().Sub(start)
	return tick, err
}

// WarpHeld writes to dst, unlabelled, the frame a PREDICTED tick with
// motion m would show: the held frame warped by the ground method with the
// far-scene depth estimated for it. Replays call it on STALE ticks too, to
// score the prediction the policy did not show (for choosing a cutoff); it
// does not change what the Filler holds. dst is owned by the caller. It
// returns the far depth used, metres (+Inf for rotation only), and fails
// with ErrNoFrame before the first real frame.
func (f *Filler) WarpHeld(m filter.Motion, dst *gocv.Mat) (Synthesis, float64, error) {
	if f.closed {
		return Synthesis{}, 0, ErrClosed
	}
	if !f.have {
		return Synthesis{}, 0, ErrNoFrame
	}
	if !matUsable(dst) {
		return Synthesis{}, 0, fmt.Errorf("destination is nil or a zero gocv.Mat; create it with gocv.NewMat(): %w", ErrFrameFormat)
	}
	d := f.farDepthFor()
	syn, err := f.synth.SynthesizeFar(f.last, m, d, dst)
	return syn, d, err
}

// farDepthFor returns the far-scene depth for the held frame, estimating it
// once per held frame from the comparison frame (see comparisonFrame and
// FarDepthEstimator): over the 33 ms to the frame before it, the far scene
// moves too little at the sweep's 160 px to tell its depths apart.
// Without a previous frame, a usable motion between the two, or with the
// estimate switched off, the far scene is at infinity.
func (f *Filler) farDepthFor() float64 {
	if f.farKnown && f.farFor == f.lastUs {
		return f.farDepth
	}
	d := math.Inf(1)
	if !f.cfg.FarDepth.Off && f.havePrev {
		old, oldUs := f.comparisonFrame()
		if m, err := f.cfg.Motion.Relative(oldUs, f.lastUs); err == nil {
			if est, err := f.depth.Estimate(old, f.last, f.cfg.Camera, m); err == nil {
				d = est
			}
		}
	}
	f.farDepth, f.farFor, f.farKnown = d, f.lastUs, true
	return d
}

// comparisonFrame returns the real frame the upright and mover estimates
// compare the held frame with, and its capture time: the oldest kept frame
// at most MoverOptions.BaselineMs older (see MoverFrameWanted), else the
// frame before the held one. The longer baseline separates upright
// surfaces 15-30 m away from the far scene, which the 33 ms between two
// frames at 10 m/s barely moves apart at the estimate's resolution (a
// tenth of a low-resolution pixel), and makes the parallax the upright
// estimate measures proportionally larger than its noise.
func (f *Filler) comparisonFrame() (gocv.Mat, int64) {
	if k, ok := f.MoverFrameWanted(f.lastUs, f.olderUs[:f.olderN]); ok {
		return f.older[k], f.olderUs[k]
	}
	return f.prev, f.prevUs
}

// uprightModel returns the upright structure of the held frame, estimated
// once per held frame from the comparison frame (see comparisonFrame and
// UprightEstimator); nil when switched off or not estimable.
func (f *Filler) uprightModel(farDepthM float64) *UprightModel {
	if f.cfg.Upright.Off || !f.havePrev {
		return nil
	}
	if !f.uprightKnown || f.uprightFor != f.lastUs {
		f.upright.Segments = f.upright.Segments[:0]
		old, oldUs := f.comparisonFrame()
		if m, err := f.cfg.Motion.Relative(oldUs, f.lastUs); err == nil {
			if err := f.uprightEst.Estimate(old, f.last, f.cfg.Camera, m, farDepthM, &f.upright); err != nil {
				f.upright.Segments = f.upright.Segments[:0]
			}
		}
		f.uprightFor, f.uprightKnown = f.lastUs, true
	}
	return &f.upright
}

// moverModel returns the movers of the held frame, detected once per held
// frame against the frame before it (see MoverDetector); nil when switched
// off or not detectable.
func (f *Filler) moverModel(farDepthM float64, up *UprightModel) *MoverModel {
	if f.cfg.Movers.Off || !f.havePrev {
		return nil
	}
	if !f.moversKnown || f.moversFor != f.lastUs {
		f.movers.Movers = f.movers.Movers[:0]
		// The upright structure up was estimated against the same
		// frame (comparisonFrame), for the compensation and the parallax
		// check alike.
		old, oldUs := f.comparisonFrame()
		f.moversFromUs = oldUs
		if m, err := f.cfg.Motion.Relative(oldUs, f.lastUs); err == nil {
			var static *UprightEstimator
			if _, ok := f.uprightEst.Residual(); ok && up != nil {
				static = f.uprightEst
			}
			if up != nil {
				// The segments as the hypotheses chose them, before
				// their refinement: the movers' thresholds were set on
				// those (with the refined ones, recall fell from 0.72
				// to 0.67 on a simdrive --traffic drive).
				f.moverUp.Segments = append(f.moverUp.Segments[:0], f.uprightEst.coarse...)
				up = &f.moverUp
			}
			if err := f.moverDet.Detect(old, f.last, f.cfg.Camera, m, farDepthM, up, static, &f.movers); err != nil {
				f.movers.Movers = f.movers.Movers[:0]
			}
		}
		f.moversFor, f.moversKnown = f.lastUs, true
	}
	return &f.movers
}

// desaturate writes the held frame to dst in grey at half brightness.
func (f *Filler) desaturate(dst *gocv.Mat) {
	gocv.CvtColor(f.last, &f.gray, gocv.ColorBGRToGray)
	f.gray.ConvertToWithParams(&f.gray, gocv.MatTypeCV8U, 0.5, 0)
	gocv.CvtColor(f.gray, dst, gocv.ColorGrayToBGR)
}
