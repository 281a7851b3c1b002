package simvehicle

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"sync"
	"testing"
	"time"

	"github.com/pion/rtp"

	"stopgap/stream/recording"
)

// nullPublisher accepts everything and never asks for a keyframe.
type nullPublisher struct{}

func (nullPublisher) WriteRTP(*rtp.Packet) error         { return nil }
func (nullPublisher) SendTelemetry([]byte) error         { return nil }
func (nullPublisher) KeyframeRequests() <-chan time.Time { return nil }

// TestOnboardRecordsEveryFrame plays a drive on a virtual clock with an
// onboard recorder: the onboard recording holds every frame of the drive,
// byte for byte, at the capture time and with the RTP timestamp the vehicle
// sent it with (blank for frames it skipped), and every telemetry sample.
func TestOnboardRecordsEveryFrame(t *testing.T) {
	dir := t.TempDir()
	rec := writeTestRecording(t, filepath.Join(dir, "drive"), 64, 48, 20, 30)
	ob, err := NewOnboard(filepath.Join(dir, "onboard"), rec.Camera, 0, nil)
	if err != nil {
		t.Fatal(err)
	}
	clk := newVirtualClock()
	link, err := NewLink(LinkConfig{}, clk)
	if err != nil {
		t.Fatal(err)
	}
	var mu sync.Mutex
	sent := map[int64]FrameInfo{} // capture Unix µs -> frame sent
	veh, err := New(Config{Recording: rec, Link: link, Clock: clk, Onboard: ob, OnFrame: func(fi FrameInfo) {
		mu.Lock()
		sent[fi.CaptureUs] = fi
		mu.Unlock()
	}})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()
	if err := veh.Run(ctx, nullPublisher{}); err != nil {
		t.Fatalf("Run: %v", err)
	}
	if err := ob.Close(); err != nil {
		t.Fatal(err)
	}
	st := ob.Stats()
	if st.Dropped != 0 || st.Failed != 0 {
		t.Fatalf("onboard stats %+v", st)
	}
	got, err := recording.Open(ob.Dir())
	if err != nil {
		t.Fatal(err)
	}
	if len(got.Frames) != len(rec.Frames) {
		t.Fatalf("onboard has %d frames, the drive %d", len(got.Frames), len(rec.Frames))
	}
	start := veh.StartTime().UnixMicro()
	nSent := 0
	for i, f := range got.Frames {
		if want := start + rec.Frames[i].CaptureUs - rec.Frames[0].CaptureUs; f.CaptureUs != want {
			t.Errorf("onboard frame %d captured at %d, want %d", i, f.CaptureUs, want)
		}
		fi, wasSent := sent[f.CaptureUs]
		if wasSent != f.HasRTP || wasSent && fi.RTPTimestamp != f.RTPTimestamp {
			t.Errorf("onboard frame %d: rtp %v %d, vehicle sent %v %d", i, f.HasRTP, f.RTPTimestamp, wasSent, fi.RTPTimestamp)
		}
		if wasSent {
			nSent++
		}
		a, _ := got.FramePath(i)
		b, _ := rec.FramePath(i)
		ab, err1 := os.ReadFile(a)
		bb, err2 := os.ReadFile(b)
		if err1 != nil || err2 != nil || !bytes.Equal(ab, bb) {
			t.Errorf("onboard frame %d differs from the drive's image (%v, %v)", i, err1, err2)
		}
	}
	if nSent == 0 {
		t.Error("no frame recorded as sent")
	}
	if len(got.Telemetry) != len(rec.Telemetry) || uint64(len(got.Telemetry)) != veh.Stats().TelemetryRows {
		t.Fatalf("onboard telemetry %d rows, drive %d, published %d", len(got.Telemetry), len(rec.Telemetry), veh.Stats().TelemetryRows)
	}
	for i, r := range got.Telemetry {
		d := rec.Telemetry[i]
		if r.TimeUs != start+d.TimeUs-rec.Frames[0].CaptureUs || r.SpeedMps != d.SpeedMps || r.YawRateRps != d.YawRateRps || r.HasArrival {
			t.Errorf("onboard telemetry %d: %+v, drive %+v", i, r, d)
		}
	}
}
