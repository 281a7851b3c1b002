package recording

import (
	"errors"
	"path/filepath"
	"testing"
)

// TestMissingFramesAndDeadlinesRoundTrip: the live relay records frames that
// never arrived (blank file) and each tick's deadline; Open reads both back.
func TestMissingFramesAndDeadlinesRoundTrip(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "rec")
	w, err := Create(dir, testCam)
	if err != nil {
		t.Fatal(err)
	}
	must := func(err error) {
		t.Helper()
		if err != nil {
			t.Fatal(err)
		}
	}
	must(w.WriteFrame(0, 1000, []byte("img0"), "jpg"))
	must(w.WriteArrivalDeadline(0, 5000, true, 6000))
	must(w.WriteMissingFrame(1, 34333))
	must(w.WriteArrivalDeadline(1, 0, false, 39333))
	must(w.WriteFrame(2, 67667, []byte("img2"), "jpg"))
	must(w.WriteArrivalRow(Arrival{Index: 2, ArrivalUs: 72000, Arrived: true, RTPTimestamp: 4294967295, HasRTP: true}))
	must(w.WriteTelemetry(TelemetryRow{TimeUs: 5}))
	must(w.Close())

	r, err := Open(dir)
	if err != nil {
		t.Fatal(err)
	}
	if len(r.Frames) != 3 || r.Frames[0].NoImage || !r.Frames[1].NoImage || r.Frames[2].NoImage {
		t.Fatalf("frames %+v, want frame 1 without an image", r.Frames)
	}
	if _, err := r.FramePath(1); !errors.Is(err, ErrNoImage) {
		t.Errorf("FramePath(1) err %v, want ErrNoImage", err)
	}
	want := []Arrival{
		{Index: 0, ArrivalUs: 5000, Arrived: true, DeadlineUs: 6000, HasDeadline: true, CaptureUs: 1000, HasCapture: true},
		{Index: 1, DeadlineUs: 39333, HasDeadline: true, CaptureUs: 34333, HasCapture: true},
		{Index: 2, ArrivalUs: 72000, Arrived: true, CaptureUs: 67667, HasCapture: true, RTPTimestamp: 4294967295, HasRTP: true},
	}
	for i, a := range r.Arrivals {
		if a != want[i] {
			t.Errorf("arrival %d: %+v, want %+v", i, a, want[i])
		}
	}
}
