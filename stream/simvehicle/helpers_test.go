package simvehicle

import (
	"bytes"
	"context"
	"image"
	"image/color"
	"image/jpeg"
	"sync"
	"testing"
	"time"

	"stopgap/stream/recording"
)

// virtualClock jumps forward on WaitUntil, so time-driven code runs at once
// and deterministically.
type virtualClock struct {
	mu  sync.Mutex
	now time.Time
}

func newVirtualClock() *virtualClock {
	return &virtualClock{now: time.Date(2026, 1, 2, 3, 4, 5, 0, time.UTC)}
}

func (c *virtualClock) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.now
}

func (c *virtualClock) Advance(d time.Duration) {
	c.mu.Lock()
	c.now = c.now.Add(d)
	c.mu.Unlock()
}

func (c *virtualClock) WaitUntil(ctx context.Context, t time.Time) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	c.mu.Lock()
	if t.After(c.now) {
		c.now = t
	}
	c.mu.Unlock()
	return nil
}

// writeTestRecording writes n frames (a bright bar moving right over a
// gradient, JPEG) at fps and telemetry at 100 Hz into dir.
func writeTestRecording(t testing.TB, dir string, w, h, n int, fps float64) *recording.Recording {
	t.Helper()
	wr, err := recording.Create(dir, recording.Camera{Width: w, Height: h, Fx: float64(w) / 2, Fy: float64(w) / 2,
		Cx: float64(w) / 2, Cy: float64(h) / 2, HeightM: 1.4, PitchDeg: 5, XOffsetM: 1.5})
	if err != nil {
		t.Fatal(err)
	}
	img := image.NewRGBA(image.Rect(0, 0, w, h))
	var buf bytes.Buffer
	periodUs := int64(1e6 / fps)
	for i := range n {
		for y := range h {
			for x := range w {
				v := uint8((x + y + 4*i) % 256)
				if (x-8*i)%w >= 0 && (x-8*i)%w < 16 {
					v = 250
				}
				img.SetRGBA(x, y, color.RGBA{v, uint8(y), 255 - v, 255})
			}
		}
		buf.Reset()
		if err := jpeg.Encode(&buf, img, &jpeg.Options{Quality: 90}); err != nil {
			t.Fatal(err)
		}
		if err := wr.WriteFrame(i, int64(i)*periodUs, buf.Bytes(), "jpg"); err != nil {
			t.Fatal(err)
		}
	}
	durUs := int64(n) * periodUs
	for tu := int64(0); tu < durUs; tu += 10_000 {
		if err := wr.WriteTelemetry(recording.TelemetryRow{TimeUs: tu, SpeedMps: 10, YawRateRps: 0.01}); err != nil {
			t.Fatal(err)
		}
	}
	if err := wr.Close(); err != nil {
		t.Fatal(err)
	}
	rec, err := recording.Open(dir)
	if err != nil {
		t.Fatal(err)
	}
	return rec
}
