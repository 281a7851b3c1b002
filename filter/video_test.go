package filter

import (
	"errors"
	"math"
	"slices"
	"testing"
)

// TestVideoSampleRejected: a video sample with a missing, non-finite or
// impossible noise, or with controls it cannot carry, and a telemetry
// sample with a noise of its own, are rejected, counted, and leave the
// filter unchanged.
func TestVideoSampleRejected(t *testing.T) {
	good := Sample{TimeUs: 10_000, SpeedMps: 8, YawRateRps: 0.1, Source: SourceVideo, SpeedStdMps: 0.2, YawRateStdRps: 0.02}
	tests := []struct {
		name string
		edit func(*Sample)
		want error
	}{
		{"zero speed std", func(s *Sample) { s.SpeedStdMps = 0 }, ErrOutOfRange},
		{"negative yaw std", func(s *Sample) { s.YawRateStdRps = -0.1 }, ErrOutOfRange},
		{"NaN speed std", func(s *Sample) { s.SpeedStdMps = math.NaN() }, ErrNotFinite},
		{"Inf yaw std", func(s *Sample) { s.YawRateStdRps = math.Inf(1) }, ErrNotFinite},
		{"huge speed std", func(s *Sample) { s.SpeedStdMps = 2 * MaxSpeedMps }, ErrOutOfRange},
		{"video with accel", func(s *Sample) { s.HasAccel, s.AccelMps2 = true, 1 }, ErrOutOfRange},
		{"video with steer", func(s *Sample) { s.HasSteer, s.SteerRad = true, 0.1 }, ErrOutOfRange},
		{"telemetry with std", func(s *Sample) { s.Source = SourceTelemetry }, ErrOutOfRange},
		{"unknown source", func(s *Sample) { s.Source = 7 }, ErrOutOfRange},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			f := mustNew(t, Config{Model: ModelCTRV})
			mustAdd(t, f, good)
			before := snapshot(f)
			s := good
			s.TimeUs += 10_000
			tc.edit(&s)
			err := f.Add(s)
			if !errors.Is(err, tc.want) {
				t.Fatalf("Add(%+v) = %v, want %v", s, err, tc.want)
			}
			if f.Rejected().Total() != 1 {
				t.Fatalf("rejections counted %d, want 1", f.Rejected().Total())
			}
			if got := snapshot(f); !slices.Equal(before, got) {
				t.Fatal("a rejected sample changed the state")
			}
		})
	}
}

// TestVideoSampleUsesItsOwnNoise: a telemetry sample and a video sample of
// the same instant fuse as two independent scalar measurements of speed
// and of yaw rate (CTRV, no cross terms at the start of a track):
// posterior mean (z1 R + z2 P)/(P + R) and variance P R/(P + R), with P the
// telemetry noise of Config and R the video sample's own (the scalar Kalman
// update, textbook closed form). CTRV only
// (the video's yaw rate must not leak into speed, as the bicycle's would).
func TestVideoSampleUsesItsOwnNoise(t *testing.T) {
	f := mustNew(t, Config{Model: ModelCTRV})
	tel := Sample{TimeUs: 0, SpeedMps: 10, YawRateRps: 0.1}
	vid := Sample{TimeUs: 0, SpeedMps: 10.6, YawRateRps: 0.16, Source: SourceVideo, SpeedStdMps: 0.3, YawRateStdRps: 0.03}
	mustAdd(t, f, tel, vid)
	st, err := f.Predict(0)
	if err != nil {
		t.Fatal(err)
	}
	c := f.Config()
	for _, ch := range []struct {
		name             string
		got, gotVar      float64
		z1, z2, sd1, sd2 float64
	}{
		{"speed", st.Vec[IdxSpeed], st.Cov[IdxSpeed][IdxSpeed], tel.SpeedMps, vid.SpeedMps, c.SpeedNoiseMps, vid.SpeedStdMps},
		{"yaw rate", st.YawRateRps, st.Cov[IdxTurn][IdxTurn], tel.YawRateRps, vid.YawRateRps, c.YawRateNoiseRps, vid.YawRateStdRps},
	} {
		p, r := ch.sd1*ch.sd1, ch.sd2*ch.sd2
		want, wantVar := (ch.z1*r+ch.z2*p)/(p+r), p*r/(p+r)
		if math.Abs(ch.got-want) > 1e-9 || math.Abs(ch.gotVar-wantVar) > 1e-12 {
			t.Errorf("%s %.9f var %.3g, want %.9f var %.3g", ch.name, ch.got, ch.gotVar, want, wantVar)
		}
	}
}

// TestVideoOnlyTrack: a track fed by video samples alone starts from the
// first one with its noise as the prior and follows a steady turn.
func TestVideoOnlyTrack(t *testing.T) {
	f := mustNew(t, Config{Model: ModelCTRV})
	for i := range 30 {
		mustAdd(t, f, Sample{TimeUs: int64(i) * 33_333, SpeedMps: 6, YawRateRps: 0.2, Source: SourceVideo, SpeedStdMps: 0.4, YawRateStdRps: 0.05})
	}
	m, err := f.Relative(29*33_333, 29*33_333+500_000)
	if err != nil {
		t.Fatal(err)
	}
	// CTRV closed form over 0.5 s at 6 m/s and 0.2 rad/s: heading 0.1 rad,
	// x = v/ω sin θ, y = v/ω (1 - cos θ).
	wantX, wantY := 6/0.2*math.Sin(0.1), 6/0.2*(1-math.Cos(0.1))
	if math.Abs(m.DxM-wantX) > 1e-6 || math.Abs(m.DyM-wantY) > 1e-6 || math.Abs(m.DyawRad-0.1) > 1e-6 {
		t.Errorf("motion (%.6f, %.6f, %.6f), want (%.6f, %.6f, 0.1)", m.DxM, m.DyM, m.DyawRad, wantX, wantY)
	}
}

// TestVideoSamplesHaveNoTurnTrend: video yaw rates are too noisy for the
// gap's turn trend, so a video-only track whose yaw rate ramps predicts a
// gap exactly as with the trend switched off, while the same ramp from
// telemetry does change the prediction.
func TestVideoSamplesHaveNoTurnTrend(t *testing.T) {
	run := func(src Source, off bool) Motion {
		f := mustNew(t, Config{Model: ModelCTRV, TurnAccelOff: off})
		for i := range 40 {
			s := Sample{TimeUs: int64(i) * 10_000, SpeedMps: 8, YawRateRps: 0.01 * float64(i)}
			if src == SourceVideo {
				s.Source, s.SpeedStdMps, s.YawRateStdRps = SourceVideo, 0.1, 0.01
			}
			mustAdd(t, f, s)
		}
		m, err := f.Relative(390_000, 690_000)
		if err != nil {
			t.Fatal(err)
		}
		return m
	}
	if v, vOff := run(SourceVideo, false), run(SourceVideo, true); v.DyawRad != vOff.DyawRad || v.Cov != vOff.Cov {
		t.Errorf("video track: heading %.6f cov %v with the trend on, %.6f %v off; want equal", v.DyawRad, v.Cov[2][2], vOff.DyawRad, vOff.Cov[2][2])
	}
	if tel, telOff := run(SourceTelemetry, false), run(SourceTelemetry, true); tel.DyawRad == telOff.DyawRad {
		t.Errorf("telemetry track: heading %.6f with and without the trend; the ramp should change it", tel.DyawRad)
	}
}

// TestVideoGapNoise: after a video sample the gap's heading variance
// grows with Config.VideoGapYawAccelNoiseRps2, by the discrete white
// noise model's τ⁴/4 term, while a telemetry track's gap ignores it.
func TestVideoGapNoise(t *testing.T) {
	heading := func(src Source, videoGap float64) float64 {
		f := mustNew(t, Config{Model: ModelCTRV, VideoGapYawAccelNoiseRps2: videoGap})
		for i := range 30 {
			s := Sample{TimeUs: int64(i) * 33_333, SpeedMps: 6, YawRateRps: 0.2}
			if src == SourceVideo {
				s.Source, s.SpeedStdMps, s.YawRateStdRps = SourceVideo, 0.1, 0.01
			}
			mustAdd(t, f, s)
		}
		m, err := f.Relative(29*33_333, 29*33_333+400_000)
		if err != nil {
			t.Fatal(err)
		}
		return m.Cov[2][2]
	}
	const tau = 0.4
	lo, hi := heading(SourceVideo, 0.1), heading(SourceVideo, 0.3)
	if want := (0.3*0.3 - 0.1*0.1) * tau * tau * tau * tau / 4; math.Abs((hi-lo)-want) > 1e-9 {
		t.Errorf("video track: heading variance %.6g with 0.3 rad/s², %.6g with 0.1; difference %.6g, want %.6g", hi, lo, hi-lo, want)
	}
	if a, b := heading(SourceTelemetry, 0.1), heading(SourceTelemetry, 0.3); a != b {
		t.Errorf("telemetry track: heading variance %.6g and %.6g; the video's gap noise must not apply", a, b)
	}
}

// TestVideoSpeedTrend: over a gap after video samples whose speed ramps
// at 2 m/s², the speed keeps changing at that rate (the forward motion
// over 0.5 s grows by a·τ²/2 = 0.25 m against the speed held), and
// VideoSpeedTrendOff holds it.
func TestVideoSpeedTrend(t *testing.T) {
	run := func(off bool) Motion {
		f := mustNew(t, Config{Model: ModelCTRV, VideoSpeedTrendOff: off})
		for i := range 30 {
			ts := float64(i) / 30
			mustAdd(t, f, Sample{TimeUs: int64(i) * 33_333, SpeedMps: 6 + 2*ts, Source: SourceVideo, SpeedStdMps: 0.02, YawRateStdRps: 0.005})
		}
		m, err := f.Relative(29*33_333, 29*33_333+500_000)
		if err != nil {
			t.Fatal(err)
		}
		return m
	}
	on, off := run(false), run(true)
	if d := on.DxM - off.DxM; math.Abs(d-0.25) > 0.01 {
		t.Errorf("forward motion %.4f m with the trend, %.4f m without: difference %.4f, want 0.25", on.DxM, off.DxM, d)
	}
	if d := on.SpeedMps - off.SpeedMps; math.Abs(d-1) > 0.02 {
		t.Errorf("speed at the gap's end %.3f with the trend, %.3f without: difference %.3f, want 1 (2 m/s² for 0.5 s)", on.SpeedMps, off.SpeedMps, d)
	}
}
