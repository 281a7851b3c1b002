package predictor

import (
	"errors"
	"testing"

	"gocv.io/x/gocv"
)

// TestLeadMovesAndLabels: a LIVE frame 100 ms old with a confident motion
// is moved ahead exactly as Synthesize would move it, and labelled with
// the lead border, which differs from the PREDICTED border; with an
// unconfident motion, a motion error, an age beyond MaxLeadMs or no age at
// all the real frame is shown unchanged; bad input is refused.
func TestLeadMovesAndLabels(t *testing.T) {
	cam := egoCam()
	frame := texturedFrame(t, cam.Width, cam.Height, 9)
	defer frame.Close()
	dst, unl, want := gocv.NewMat(), gocv.NewMat(), gocv.NewMat()
	defer dst.Close()
	defer unl.Close()
	defer want.Close()

	confident := &fakeMotion{SpeedMps: 10, SigmaPerS: 0.05}
	l, err := NewLeader(LeadConfig{Camera: cam, Motion: confident, CutoffConfidence: 0.5})
	if err != nil {
		t.Fatal(err)
	}
	defer l.Close()
	l.Unlabelled = &unl
	tick, err := l.Lead(frame, 1_000_000, 1_100_000, &dst)
	if err != nil || !tick.Moved {
		t.Fatalf("Lead: %+v %v, want a moved frame", tick, err)
	}
	s, err := NewSynthesizer(cam, SynthOptions{})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	if _, err := s.Synthesize(frame, tick.Motion, &want); err != nil {
		t.Fatal(err)
	}
	if !equalMats(t, unl, want) {
		t.Error("the moved frame is not the synthesized one")
	}
	if equalMats(t, unl, frame) {
		t.Error("the moved frame equals the real one")
	}
	// The border is the lead pattern, and that pattern is not the
	// PREDICTED one.
	lab, err := NewLabeler(cam.Width, cam.Height)
	if err != nil {
		t.Fatal(err)
	}
	defer lab.Close()
	top := lab.borderRects()[0]
	var region [3]gocv.Mat
	for i, m := range []gocv.Mat{dst, l.pattern, lab.pattern} {
		r := m.Region(top)
		region[i] = r.Clone() // contiguous, for the byte comparison
		r.Close()
		defer region[i].Close()
	}
	got, pat, pred := region[0], region[1], region[2]
	if !equalMats(t, got, pat) {
		t.Error("the top border is not the lead pattern")
	}
	if equalMats(t, pat, pred) {
		t.Error("the lead border looks like the PREDICTED border")
	}
	if !(tick.LabelFraction > 0) {
		t.Errorf("label share %v, want > 0", tick.LabelFraction)
	}

	for _, tc := range []struct {
		name    string
		motion  MotionSource
		display int64
	}{
		{"unconfident", &fakeMotion{SpeedMps: 10, SigmaPerS: 50}, 1_100_000},
		{"motion error", &fakeMotion{Err: errors.New("no data")}, 1_100_000},
		{"too old", confident, 1_000_000 + DefaultMaxLeadMs*1000 + 1000},
		{"no age", confident, 1_000_000},
	} {
		t.Run(tc.name, func(t *testing.T) {
			l, err := NewLeader(LeadConfig{Camera: cam, Motion: tc.motion, CutoffConfidence: 0.5})
			if err != nil {
				t.Fatal(err)
			}
			defer l.Close()
			tick, err := l.Lead(frame, 1_000_000, tc.display, &dst)
			if err != nil || tick.Moved {
				t.Fatalf("Lead: %+v %v, want the frame unchanged", tick, err)
			}
			if !equalMats(t, dst, frame) {
				t.Error("dst is not the real frame")
			}
		})
	}

	if _, err := l.Lead(frame, 1_000_000, 999_000, &dst); !errors.Is(err, ErrTargetBeforeFrame) {
		t.Errorf("display before capture: %v, want ErrTargetBeforeFrame", err)
	}
	for _, cfg := range []LeadConfig{
		{Camera: cam, CutoffConfidence: 0.5},
		{Camera: cam, Motion: confident},
		{Camera: cam, Motion: confident, CutoffConfidence: 0.5, MaxLeadMs: -1},
	} {
		if l, err := NewLeader(cfg); err == nil {
			l.Close()
			t.Errorf("NewLeader(%+v) accepted", cfg)
		}
	}
}
