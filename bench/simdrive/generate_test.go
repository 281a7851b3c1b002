package simdrive

import (
	"context"
	"errors"
	"math"
	"os"
	"path/filepath"
	"testing"

	"gocv.io/x/gocv"

	"stopgap/stream/recording"
)

// small is a fast configuration for unit tests.
var small = Config{Width: 320, Height: 180, DurationS: 2, GroundTexelM: 0.1}

func TestGenerateWritesReadableRecording(t *testing.T) {
	out := filepath.Join(t.TempDir(), "drive")
	calls := 0
	if err := Generate(context.Background(), small, out, func(done, total int) {
		calls++
		if done != calls || total != 60 {
			t.Errorf("progress(%d, %d) on call %d", done, total, calls)
		}
	}); err != nil {
		t.Fatal(err)
	}
	r, err := recording.Open(out)
	if err != nil {
		t.Fatal(err)
	}
	if len(r.Warnings) != 0 {
		t.Errorf("warnings: %q", r.Warnings)
	}
	wantCam, _ := small.Camera()
	if r.Camera != wantCam {
		t.Errorf("camera %+v, want %+v", r.Camera, wantCam)
	}
	// 320 px wide with a 90° field of view: fx = 160 / tan(45°) = 160 (worked by hand).
	if math.Abs(r.Camera.Fx-160) > 1e-9 || r.Camera.Cx != 160 || r.Camera.Cy != 90 {
		t.Errorf("intrinsics fx %v cx %v cy %v", r.Camera.Fx, r.Camera.Cx, r.Camera.Cy)
	}
	if len(r.Frames) != 60 || len(r.Truth) != 60 {
		t.Fatalf("frames %d truth %d, want 60", len(r.Frames), len(r.Truth))
	}
	if r.Frames[1].CaptureUs != 33333 || r.Frames[59].CaptureUs != 1966667 {
		t.Errorf("capture times %d, %d", r.Frames[1].CaptureUs, r.Frames[59].CaptureUs)
	}
	// 100 Hz from 0 through 2 s inclusive.
	if len(r.Telemetry) != 201 || r.Telemetry[200].TimeUs != 2000000 {
		t.Errorf("telemetry rows %d", len(r.Telemetry))
	}
	for _, s := range r.Telemetry {
		if !s.HasAccel || !s.HasSteer || s.HasArrival {
			t.Fatalf("telemetry columns: %+v", s)
		}
	}
	for _, i := range []int{0, 59} {
		p, _ := r.FramePath(i)
		img := gocv.IMRead(p, gocv.IMReadColor)
		if img.Cols() != r.Camera.Width || img.Rows() != r.Camera.Height {
			t.Errorf("frame %d is %dx%d, camera.json says %dx%d", i, img.Cols(), img.Rows(), r.Camera.Width, r.Camera.Height)
		}
		img.Close()
	}
	entries, _ := os.ReadDir(filepath.Dir(out))
	if len(entries) != 1 {
		t.Errorf("leftovers beside the output: %v", entries)
	}
}

func TestGenerateFailureLeavesNothing(t *testing.T) {
	parent := t.TempDir()
	out := filepath.Join(parent, "drive")
	ctx, cancel := context.WithCancel(context.Background())
	err := Generate(ctx, small, out, func(done, total int) {
		if done == 5 {
			cancel()
		}
	})
	if !errors.Is(err, context.Canceled) {
		t.Fatalf("error %v, want context.Canceled", err)
	}
	if entries, _ := os.ReadDir(parent); len(entries) != 0 {
		t.Errorf("cancelled run left %v", entries)
	}
	if err := os.Mkdir(out, 0o755); err != nil {
		t.Fatal(err)
	}
	if err := Generate(context.Background(), small, out, nil); !errors.Is(err, ErrExists) {
		t.Errorf("existing output: %v, want ErrExists", err)
	}
	bad := small
	bad.FPS = -1
	if err := Generate(context.Background(), bad, filepath.Join(parent, "x"), nil); !errors.Is(err, ErrConfig) {
		t.Errorf("bad config: %v, want ErrConfig", err)
	}
}

// TestTruthConsistentWithMotion integrates the truth's own speed and yaw
// rate columns with an independent second-order scheme at the frame rate
// and compares with the truth poses. The trajectory is smooth (curvature
// changes over 14 s), so a midpoint-heading trapezoid at 30 Hz should agree
// with the 1 kHz RK4 to well under 1 cm and 1e-4 rad over 2 s (error
// O(dt²) per unit time: about v·ω²·dt²·T ≈ 10·0.04·1e-3·2 ≈ 1 mm).
func TestTruthConsistentWithMotion(t *testing.T) {
	cfg, _ := small.withDefaults()
	tr := newTrajectory(cfg.SpeedMps, cfg.DurationS)
	n := cfg.frameCount()
	x, y, yaw := 0.0, 0.0, 0.0
	prev := tr.PoseAt(0)
	if prev != (pose{}) {
		t.Fatalf("pose at 0 = %+v, want origin", prev)
	}
	for i := 1; i < n; i++ {
		t0, t1 := float64(cfg.captureUs(i-1))*1e-6, float64(cfg.captureUs(i))*1e-6
		dt := t1 - t0
		dyaw := (tr.YawRateRps(t0) + tr.YawRateRps(t1)) / 2 * dt
		v := (tr.SpeedMps(t0) + tr.SpeedMps(t1)) / 2
		mid := yaw + dyaw/2
		x += v * dt * math.Cos(mid)
		y += v * dt * math.Sin(mid)
		yaw += dyaw
		p := tr.PoseAt(cfg.captureUs(i))
		if d := math.Hypot(p.XM-x, p.YM-y); d > 0.01 || math.Abs(p.YawRad-yaw) > 1e-4 {
			t.Fatalf("frame %d: truth %+v, independent integration (%v, %v, %v), distance %v m", i, p, x, y, yaw, d)
		}
	}
	// The scenario turns left first (positive yaw rate) and speeds up.
	if tr.YawRateRps(1) <= 0 || tr.AccelMps2(1) <= 0 || tr.YawRateRps(10) >= 0 || tr.AccelMps2(5) >= 0 {
		t.Errorf("scenario signs: yaw rate %v at 1 s, %v at 10 s; accel %v at 1 s, %v at 5 s",
			tr.YawRateRps(1), tr.YawRateRps(10), tr.AccelMps2(1), tr.AccelMps2(5))
	}
}

// TestTelemetryNoise checks the noise statistics against the configured
// sigmas. With n = 2001 samples the sample standard deviation has a
// relative standard error of about 1/sqrt(2n) = 1.6%, so 8% (5 standard
// errors) is a tolerance a correct generator fails with negligible
// probability; the mean must be within 5 sigma/sqrt(n) of zero.
func TestTelemetryNoise(t *testing.T) {
	cfg, err := Config{DurationS: 20, Seed: 7, SpeedSigmaMps: 0.1, YawRateSigmaRps: 0.003, AccelSigmaMps2: 0.2, SteerSigmaRad: 0.001}.withDefaults()
	if err != nil {
		t.Fatal(err)
	}
	tr := newTrajectory(cfg.SpeedMps, cfg.DurationS)
	rows := telemetryReadBack(t, cfg, tr)
	if len(rows) != 2001 {
		t.Fatalf("%d rows", len(rows))
	}
	channels := []struct {
		name  string
		sigma float64
		res   func(s recording.TelemetryRow, ts float64) float64
	}{
		{"speed", cfg.SpeedSigmaMps, func(s recording.TelemetryRow, ts float64) float64 { return s.SpeedMps - tr.SpeedMps(ts) }},
		{"yaw rate", cfg.YawRateSigmaRps, func(s recording.TelemetryRow, ts float64) float64 { return s.YawRateRps - tr.YawRateRps(ts) }},
		{"accel", cfg.AccelSigmaMps2, func(s recording.TelemetryRow, ts float64) float64 { return s.AccelMps2 - tr.AccelMps2(ts) }},
		{"steer", cfg.SteerSigmaRad, func(s recording.TelemetryRow, ts float64) float64 {
			return s.SteerRad - math.Atan(cfg.WheelbaseM*tr.CurvaturePM(ts))
		}},
	}
	for _, ch := range channels {
		t.Run(ch.name, func(t *testing.T) {
			var sum, sum2 float64
			for _, s := range rows {
				r := ch.res(s, float64(s.TimeUs)*1e-6)
				sum += r
				sum2 += r * r
			}
			n := float64(len(rows))
			mean := sum / n
			sd := math.Sqrt((sum2 - n*mean*mean) / (n - 1))
			if math.Abs(sd/ch.sigma-1) > 0.08 {
				t.Errorf("sample sigma %.4g, configured %.4g", sd, ch.sigma)
			}
			if math.Abs(mean) > 5*ch.sigma/math.Sqrt(n) {
				t.Errorf("mean %.3g, want ~0 (sigma %.3g)", mean, ch.sigma)
			}
		})
	}
	// A negative sigma switches noise off: values are exact.
	cfg.SpeedSigmaMps, cfg.YawRateSigmaRps = -1, -1
	for _, s := range telemetryReadBack(t, cfg, tr) {
		ts := float64(s.TimeUs) * 1e-6
		if s.SpeedMps != tr.SpeedMps(ts) || s.YawRateRps != tr.YawRateRps(ts) {
			t.Fatalf("noise-free sample at %d us differs: %+v", s.TimeUs, s)
		}
	}
}

// telemetryReadBack writes only the telemetry of cfg and reads it back.
func telemetryReadBack(t *testing.T, cfg Config, tr *trajectory) []recording.TelemetryRow {
	t.Helper()
	dir := filepath.Join(t.TempDir(), "rec")
	w, err := recording.Create(dir, cfg.camera())
	if err != nil {
		t.Fatal(err)
	}
	if err := writeTelemetry(w, cfg, tr); err != nil {
		t.Fatal(err)
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	r, err := recording.Open(dir)
	if err != nil {
		t.Fatal(err)
	}
	return r.Telemetry
}

// TestPanTrajectory: the pan adds a yaw rate that holds near ±amplitude
// and reverses every half period; the integrated heading follows the yaw
// rate (central difference of the pose against YawRateRps).
func TestPanTrajectory(t *testing.T) {
	tr := newPanTrajectory(10, 8, 0.5, 4)
	plain := newTrajectory(10, 8)
	if got := tr.YawRateRps(1) - plain.YawRateRps(1); math.Abs(got-0.5) > 0.01 {
		t.Errorf("pan yaw rate at a quarter period %v, want about 0.5", got)
	}
	if got := tr.YawRateRps(3) - plain.YawRateRps(3); math.Abs(got+0.5) > 0.01 {
		t.Errorf("pan yaw rate at three quarters %v, want about -0.5", got)
	}
	if got := tr.YawRateRps(2) - plain.YawRateRps(2); math.Abs(got) > 1e-9 {
		t.Errorf("pan yaw rate at the reversal %v, want 0", got)
	}
	for _, ts := range []float64{0.5, 1.9, 2.1, 5.3} {
		us := int64(ts * 1e6)
		d := (tr.PoseAt(us+1000).YawRad - tr.PoseAt(us-1000).YawRad) / 0.002
		if math.Abs(d-tr.YawRateRps(ts)) > 1e-3 {
			t.Errorf("t=%g s: heading rate %v, yaw rate %v", ts, d, tr.YawRateRps(ts))
		}
	}
	if _, err := (Config{PanYawRateRps: 3}).withDefaults(); err == nil {
		t.Error("a 3 rad/s pan must be refused")
	}
}
