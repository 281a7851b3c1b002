package predictor

import (
	"errors"
	"math"
	"testing"
	"time"

	"gocv.io/x/gocv"

	"stopgap/filter"
)

// fakeMotion drives straight at SpeedMps with a variance per axis growing
// as (SigmaPerS · dt)²; Err, if set, is returned instead.
type fakeMotion struct {
	SpeedMps  float64
	SigmaPerS float64
	Err       error
	calls     int
}

func (f *fakeMotion) Relative(t0, t1 int64) (filter.Motion, error) {
	f.calls++
	if f.Err != nil {
		return filter.Motion{}, f.Err
	}
	dt := float64(t1-t0) / 1e6
	s := f.SigmaPerS * dt
	return filter.Motion{T0Us: t0, T1Us: t1, DxM: f.SpeedMps * dt,
		Cov:      [3][3]float64{{s * s, 0, 0}, {0, s * s, 0}, {0, 0, s * s / 100}},
		SpeedMps: f.SpeedMps}, nil
}

func equalMats(t *testing.T, a, b gocv.Mat) bool {
	t.Helper()
	x, y := bytesOf(t, a), bytesOf(t, b)
	if len(x) != len(y) {
		return false
	}
	for i := range x {
		if x[i] != y[i] {
			return false
		}
	}
	return true
}

// greyOutsideLabel reports whether every pixel not covered by the label
// (at most labelFraction of the image) is grey (B = G = R).
func greyOutsideLabel(t *testing.T, m gocv.Mat, labelFraction float64) bool {
	b := bytesOf(t, m)
	coloured := 0
	for i := 0; i < len(b); i += 3 {
		if b[i] != b[i+1] || b[i] != b[i+2] {
			coloured++
		}
	}
	return float64(coloured) <= labelFraction*float64(len(b)/3)+0.5
}

func newTestFiller(t *testing.T, src MotionSource) *Filler {
	t.Helper()
	f, err := NewFiller(FillerConfig{Camera: smallCam(), Policy: DefaultPolicy(), Motion: src})
	if err != nil {
		t.Fatal(err)
	}
	return f
}

func TestFillerSequence(t *testing.T) {
	c := smallCam()
	mot := &fakeMotion{SpeedMps: 10, SigmaPerS: 0.05}
	f := newTestFiller(t, mot)
	defer f.Close()
	unl := gocv.NewMat()
	defer unl.Close()
	f.Unlabelled = &unl
	step := time.Unix(0, 0)
	f.Now = func() time.Time { step = step.Add(5 * time.Millisecond); return step }
	dst := gocv.NewMat()
	defer dst.Close()
	frame := noiseFrame(t, c.Width, c.Height, 11)
	defer frame.Close()

	// Before any real frame: labelled "no picture", NO_PICTURE, ErrNoFrame.
	tk, err := f.Missing(500_000, &dst)
	if !errors.Is(err, ErrNoFrame) || tk.State != StateNoPicture || dst.Cols() != c.Width || tk.LabelFraction <= 0 {
		t.Fatalf("before first frame: %+v, %v", tk, err)
	}

	tk, err = f.Live(frame, 1_000_000, &dst)
	if err != nil || tk.State != StateLive || tk.LabelFraction != 0 {
		t.Fatalf("live: %+v %v", tk, err)
	}
	if !equalMats(t, dst, frame) || !equalMats(t, unl, frame) {
		t.Fatal("LIVE output must be the frame itself, unlabelled")
	}

	tk, err = f.Missing(1_033_000, &dst)
	if err != nil || tk.State != StatePredicted {
		t.Fatalf("short gap: %+v %v", tk, err)
	}
	if tk.AgeMs != 33 || tk.Motion.DxM != 0.33 || tk.Confidence <= 0.5 || tk.LabelFraction <= 0 || tk.SynthDuration != 5*time.Millisecond {
		t.Fatalf("short gap tick fields: %+v", tk)
	}
	// The unlabelled image is exactly the synthesized frame.
	s, _ := NewSynthesizer(c, SynthOptions{})
	defer s.Close()
	want := gocv.NewMat()
	defer want.Close()
	syn, err := s.Synthesize(frame, tk.Motion, &want)
	if err != nil {
		t.Fatal(err)
	}
	if !equalMats(t, unl, want) || tk.UnfilledFraction != syn.UnfilledFraction {
		t.Fatal("Unlabelled differs from Synthesizer.Synthesize output")
	}
	if equalMats(t, dst, unl) {
		t.Fatal("PREDICTED output carries no label")
	}

	// Rotation baseline.
	tk, err = f.MissingWith(MethodRotation, 1_066_000, &dst)
	if err != nil || tk.State != StatePredicted || tk.Method != MethodRotation {
		t.Fatalf("rotation: %+v %v", tk, err)
	}
	if _, err := s.SynthesizeRotation(frame, tk.Motion, &want); err != nil || !equalMats(t, unl, want) {
		t.Fatalf("rotation Unlabelled differs (%v)", err)
	}

	// Hold never predicts.
	tk, err = f.MissingWith(MethodHold, 1_066_000, &dst)
	if err != nil || tk.State != StateStale || !equalMats(t, unl, frame) || !greyOutsideLabel(t, dst, tk.LabelFraction) {
		t.Fatalf("hold: %+v %v", tk, err)
	}

	// Beyond the age cap: STALE, desaturated, held frame in Unlabelled.
	tk, err = f.Missing(1_900_000, &dst)
	if err != nil || tk.State != StateStale || tk.AgeMs != 900 {
		t.Fatalf("long gap: %+v %v", tk, err)
	}
	if !equalMats(t, unl, frame) || !greyOutsideLabel(t, dst, tk.LabelFraction) {
		t.Fatal("STALE: Unlabelled must be the held frame and dst desaturated")
	}

	// A late (older) real frame is shown but not kept.
	older := noiseFrame(t, c.Width, c.Height, 12)
	defer older.Close()
	if _, err := f.Live(older, 900_000, &dst); err != nil {
		t.Fatal(err)
	}
	if us, ok := f.LastCaptureUs(); !ok || us != 1_000_000 {
		t.Fatalf("held capture %d, want 1000000", us)
	}

	// Target before the held frame.
	if _, err := f.Missing(999_999, &dst); !errors.Is(err, ErrTargetBeforeFrame) {
		t.Fatalf("target before frame: %v", err)
	}
	if _, err := f.MissingWith(Method(9), 1_100_000, &dst); !errors.Is(err, ErrInvalidMethod) {
		t.Fatalf("bad method: %v", err)
	}
}

// TestFillerZeroMotion: with the vehicle standing still the prediction is
// the held frame itself, apart from the label.
func TestFillerZeroMotion(t *testing.T) {
	c := smallCam()
	f := newTestFiller(t, &fakeMotion{})
	defer f.Close()
	unl, dst := gocv.NewMat(), gocv.NewMat()
	defer unl.Close()
	defer dst.Close()
	f.Unlabelled = &unl
	frame := noiseFrame(t, c.Width, c.Height, 5)
	defer frame.Close()
	if _, err := f.Live(frame, 0, &dst); err != nil {
		t.Fatal(err)
	}
	tk, err := f.Missing(200_000, &dst)
	if err != nil || tk.State != StatePredicted || tk.Confidence != 1 || tk.UnfilledFraction != 0 {
		t.Fatalf("%+v %v", tk, err)
	}
	if !equalMats(t, unl, frame) {
		t.Fatal("zero motion must reproduce the held frame")
	}
}

// TestFillerLowConfidenceAndErrors: large covariance or a failing/invalid
// motion source gives STALE with confidence 0..cutoff, without failing the call.
func TestFillerLowConfidenceAndErrors(t *testing.T) {
	c := smallCam()
	frame := noiseFrame(t, c.Width, c.Height, 6)
	defer frame.Close()
	dst := gocv.NewMat()
	defer dst.Close()
	cases := []struct {
		name    string
		src     MotionSource
		wantErr bool
	}{
		{"uncertain", &fakeMotion{SpeedMps: 10, SigmaPerS: 20}, false},
		{"source error", &fakeMotion{Err: errors.New("no telemetry")}, true},
		{"NaN motion", &fakeMotion{SpeedMps: math.NaN()}, true},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			f := newTestFiller(t, tc.src)
			defer f.Close()
			if _, err := f.Live(frame, 0, &dst); err != nil {
				t.Fatal(err)
			}
			tk, err := f.Missing(100_000, &dst)
			if err != nil || tk.State != StateStale || tk.Confidence >= 0.5 {
				t.Fatalf("%+v %v", tk, err)
			}
			if (tk.MotionErr != nil) != tc.wantErr {
				t.Fatalf("MotionErr = %v", tk.MotionErr)
			}
		})
	}
}

func TestFillerConfigErrors(t *testing.T) {
	good := FillerConfig{Camera: smallCam(), Policy: DefaultPolicy(), Motion: &fakeMotion{}}
	cases := []struct {
		name string
		mod  func(*FillerConfig)
		want error
	}{
		{"nil motion", func(c *FillerConfig) { c.Motion = nil }, ErrInvalidConfig},
		{"bad policy", func(c *FillerConfig) { c.Policy.CutoffConfidence = 2 }, ErrInvalidPolicy},
		{"bad camera", func(c *FillerConfig) { c.Camera.Fx = -1 }, ErrInvalidCamera},
		{"bad tolerance", func(c *FillerConfig) { c.Confidence.ToleranceMrad = math.NaN() }, ErrInvalidConfig},
	}
	for _, tc := range cases {
		cfg := good
		tc.mod(&cfg)
		if _, err := NewFiller(cfg); !errors.Is(err, tc.want) {
			t.Errorf("%s: got %v want %v", tc.name, err, tc.want)
		}
	}
	f, err := NewFiller(good)
	if err != nil {
		t.Fatal(err)
	}
	frame := constFrame(10, 10, 0)
	defer frame.Close()
	dst := gocv.NewMat()
	defer dst.Close()
	if _, err := f.Live(frame, 0, &dst); !errors.Is(err, ErrFrameFormat) {
		t.Errorf("wrong size frame: %v", err)
	}
	if _, err := f.Missing(0, nil); !errors.Is(err, ErrFrameFormat) {
		t.Errorf("nil dst: %v", err)
	}
	f.Close()
	f.Close()
	if _, err := f.Missing(0, &dst); !errors.Is(err, ErrClosed) {
		t.Errorf("closed: %v", err)
	}
}

// TestFillerWithKalmanFilter runs the Filler on the real *filter.Filter:
// constant speed and yaw rate telemetry, a 100 ms gap must be predicted with
// a motion close to v·dt ahead.
func TestFillerWithKalmanFilter(t *testing.T) {
	kf, err := filter.New(filter.Config{Model: filter.ModelCTRV})
	if err != nil {
		t.Fatal(err)
	}
	for i := 0; i <= 50; i++ {
		if err := kf.Add(filter.Sample{TimeUs: int64(i) * 20_000, SpeedMps: 8, YawRateRps: 0.1}); err != nil {
			t.Fatal(err)
		}
	}
	c := smallCam()
	f, err := NewFiller(FillerConfig{Camera: c, Policy: DefaultPolicy(), Motion: kf})
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	frame := noiseFrame(t, c.Width, c.Height, 8)
	defer frame.Close()
	dst := gocv.NewMat()
	defer dst.Close()
	if _, err := f.Live(frame, 900_000, &dst); err != nil {
		t.Fatal(err)
	}
	tk, err := f.Missing(1_000_000, &dst)
	if err != nil || tk.MotionErr != nil {
		t.Fatalf("%+v %v", tk, err)
	}
	if math.Abs(tk.Motion.DxM-0.8) > 0.02 || math.Abs(tk.Motion.DyawRad-0.01) > 0.002 {
		t.Errorf("motion %+v, want about 0.8 m and 0.01 rad", tk.Motion)
	}
	t.Logf("100 ms gap at 8 m/s: state %v confidence %.3f sigma %.2f px", tk.State, tk.Confidence, tk.SigmaPx)
	if tk.State != StatePredicted {
		t.Errorf("state %v, want PREDICTED for a short gap on steady telemetry", tk.State)
	}
}

// TestFillerSetPolicy: the operator's cutoff takes effect on the next tick;
// an invalid policy is refused and the old one kept.
func TestFillerSetPolicy(t *testing.T) {
	c := smallCam()
	f := newTestFiller(t, &fakeMotion{SpeedMps: 10, SigmaPerS: 0.05})
	defer f.Close()
	dst := gocv.NewMat()
	defer dst.Close()
	frame := noiseFrame(t, c.Width, c.Height, 5)
	defer frame.Close()
	if _, err := f.Live(frame, 1_000_000, &dst); err != nil {
		t.Fatal(err)
	}
	tk, err := f.Missing(1_033_000, &dst)
	if err != nil || tk.State != StatePredicted {
		t.Fatalf("default policy: %v %v, want PREDICTED", tk.State, err)
	}
	if err := f.SetPolicy(Policy{CutoffConfidence: 1, MaxAgeMs: DefaultMaxAgeMs}); err != nil {
		t.Fatal(err)
	}
	if tk, _ = f.Missing(1_066_000, &dst); tk.State != StateStale || tk.Confidence >= 1 {
		t.Fatalf("cutoff 1 at confidence %v: %v, want STALE", tk.Confidence, tk.State)
	}
	if err := f.SetPolicy(Policy{CutoffConfidence: 2}); !errors.Is(err, ErrInvalidPolicy) {
		t.Fatalf("cutoff 2: err %v, want ErrInvalidPolicy", err)
	}
	if tk, _ = f.Missing(1_099_000, &dst); tk.State != StateStale {
		t.Fatalf("after a refused policy: %v, want the old cutoff (STALE)", tk.State)
	}
}

// TestFillerHold: Hold keeps a frame without a destination (the held frame
// becomes the frame before last); HoldPrevious sets the frame before last
// without changing the held one, and refuses a frame not older than it.
func TestFillerHold(t *testing.T) {
	c := smallCam()
	f := newTestFiller(t, &fakeMotion{SpeedMps: 10, SigmaPerS: 0.05})
	defer f.Close()
	a, b, old := noiseFrame(t, c.Width, c.Height, 1), noiseFrame(t, c.Width, c.Height, 2), noiseFrame(t, c.Width, c.Height, 3)
	defer a.Close()
	defer b.Close()
	defer old.Close()
	if err := f.HoldPrevious(a, 0); !errors.Is(err, ErrNoFrame) {
		t.Errorf("HoldPrevious before any frame: %v, want ErrNoFrame", err)
	}
	if err := f.Hold(a, 1_000_000); err != nil {
		t.Fatal(err)
	}
	if err := f.Hold(b, 1_033_000); err != nil {
		t.Fatal(err)
	}
	if us, ok := f.LastCaptureUs(); !ok || us != 1_033_000 {
		t.Errorf("held frame at %d (%v), want 1033000", us, ok)
	}
	if us, ok := f.PreviousCaptureUs(); !ok || us != 1_000_000 {
		t.Errorf("frame before last at %d (%v), want 1000000", us, ok)
	}
	// An older frame handed to Hold is ignored, as in Live.
	if err := f.Hold(old, 900_000); err != nil {
		t.Fatal(err)
	}
	if us, _ := f.LastCaptureUs(); us != 1_033_000 {
		t.Errorf("an older frame replaced the held one (%d)", us)
	}
	if err := f.HoldPrevious(old, 1_033_000); !errors.Is(err, ErrTargetBeforeFrame) {
		t.Errorf("HoldPrevious not older than the held frame: %v, want ErrTargetBeforeFrame", err)
	}
	if err := f.HoldPrevious(old, 900_000); err != nil {
		t.Fatal(err)
	}
	if us, _ := f.PreviousCaptureUs(); us != 900_000 {
		t.Errorf("frame before last at %d, want 900000", us)
	}
	dst := gocv.NewMat()
	defer dst.Close()
	tk, err := f.Missing(1_066_000, &dst)
	if err != nil || tk.CaptureUs != 1_033_000 {
		t.Errorf("gap after Hold: %+v, %v; want it built from the frame at 1033000", tk, err)
	}
}
