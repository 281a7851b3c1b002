package relay

import (
	"bytes"
	"fmt"
	"math"
	"testing"
	"time"

	"stopgap/filter"
	"stopgap/internal/display"
	"stopgap/predictor"
	"stopgap/stream/cadence"
	"stopgap/stream/vp8"
)

// TestDeferredConversionShowsTheSame: frames that passed through reach the
// gap filler unconverted until a gap needs them (deferred); the PREDICTED
// and STALE frames must be the bytes the relay showed when every frame was
// converted and handed to the Filler as it came. Two pipelines get the same
// I420 frames and telemetry, one marking every LIVE frame as passed through
// (kept as I420), the other as encoded by the relay (converted at once);
// the output of every gap tick is compared byte for byte. The frames
// include one with the capture time of the frame before (it replaces it,
// as in Filler.Live) and one older than the frame before (not kept), and
// runs of more LIVE frames than the two the Filler keeps.
func TestDeferredConversionShowsTheSame(t *testing.T) {
	cam := testCamera()
	const t0, periodUs = int64(1_000_000_000), int64(33_333)
	seq := movingSequence(t, 12, cam.Width, cam.Height)
	defer func() {
		for _, m := range seq {
			m.Close()
		}
	}()
	planes := make([]vp8.Image, len(seq))
	for i, m := range seq {
		px, err := m.DataPtrUint8()
		if err == nil {
			err = vp8.BGRToI420(&planes[i], px, cam.Width, cam.Height)
		}
		if err != nil {
			t.Fatal(err)
		}
	}
	// step is a LIVE frame (image index, capture tick) or a gap tick.
	type step struct {
		img, k int
		gap    bool
	}
	steps := []step{
		{img: 0, k: 0}, {img: 1, k: 1}, {img: 2, k: 2}, {img: 3, k: 3}, {gap: true, k: 4}, {gap: true, k: 5},
		{img: 4, k: 6}, {img: 5, k: 7}, {img: 6, k: 7}, // same capture time: replaces frame 5
		{gap: true, k: 8},
		{img: 7, k: 9}, {img: 8, k: 10}, {img: 9, k: 8}, // older than the held frame: not kept
		{gap: true, k: 11},
		{img: 10, k: 12}, {gap: true, k: 13}, {img: 11, k: 14}, {gap: true, k: 45}, // the last one STALE (age over the cap)
	}
	run := func(passThrough bool) [][]byte {
		r, p, done := pipelineOnFakeVehicle(t, Config{Camera: cam, LatencyMs: 50, DrawOverdue: true})
		defer done()
		for us := t0 - 500_000; us <= t0+46*periodUs; us += 10_000 {
			if err := p.flt.Add(filter.Sample{TimeUs: us, SpeedMps: 8, YawRateRps: 0.2}); err != nil {
				t.Fatal(err)
			}
		}
		var outs [][]byte
		for _, s := range steps {
			c := t0 + int64(s.k)*periodUs
			if s.gap {
				p.Missing(cadence.Tick{K: s.k, TargetUs: c, DeadlineUs: c + 70_000, Policy: predictor.DefaultPolicy()})
				px, err := p.out.DataPtrUint8()
				if err != nil {
					t.Fatal(err)
				}
				outs = append(outs, bytes.Clone(px))
				continue
			}
			pic := <-p.free
			if err := pic.img.Resize(cam.Width, cam.Height); err != nil {
				t.Fatal(err)
			}
			copy(pic.img.Y, planes[s.img].Y)
			copy(pic.img.U, planes[s.img].U)
			copy(pic.img.V, planes[s.img].V)
			pic.hasBGR = false
			p.onFrame(frameEvent{pic: pic, captureUs: c, readyUs: c + 51_000, lastPktAt: time.Now(), vehicleClk: true,
				forwarded: passThrough, forwardedAt: time.Now()})
		}
		if got := r.met.ticks[display.StatePredicted].Load(); got < 4 {
			t.Fatalf("pass-through %v: %d PREDICTED ticks, want at least 4 (a gap not predicted compares little)", passThrough, got)
		}
		if got := r.met.ticks[display.StateStale].Load(); got < 1 {
			t.Fatalf("pass-through %v: %d STALE ticks, want 1", passThrough, got)
		}
		return outs
	}
	deferredOut, eagerOut := run(true), run(false)
	if len(deferredOut) != len(eagerOut) {
		t.Fatalf("%d gap frames deferred, %d eager", len(deferredOut), len(eagerOut))
	}
	for i := range eagerOut {
		if !bytes.Equal(deferredOut[i], eagerOut[i]) {
			t.Errorf("gap frame %d differs: %d of %d bytes", i, countDiff(deferredOut[i], eagerOut[i]), len(eagerOut[i]))
		}
	}
}

func countDiff(a, b []byte) int {
	n := 0
	for i := range min(len(a), len(b)) {
		if a[i] != b[i] {
			n++
		}
	}
	return n + int(math.Abs(float64(len(a)-len(b))))
}

// TestDeferredDoesNotAllocate: keeping a passed-through frame and handing
// the deferred frames to the Filler at a gap allocate nothing on the Go
// heap once the buffers exist.
func TestDeferredDoesNotAllocate(t *testing.T) {
	cam := testCamera()
	f, err := predictor.NewFiller(predictor.FillerConfig{Camera: cam, Policy: predictor.DefaultPolicy(), Motion: newTestFilter(t)})
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	var d deferred
	defer d.close()
	pics := make([]picture, 3)
	us := int64(0)
	frames := func() {
		for i := range pics {
			us += 33_333
			// As the decoder does: the planes sized (grown only the first time).
			if err := pics[i].img.Resize(cam.Width, cam.Height); err != nil {
				t.Fatal(err)
			}
			held, have := f.LastCaptureUs()
			d.add(&pics[i], us, held, have)
		}
		if err := d.flush(f, cam.Width, cam.Height); err != nil {
			t.Fatal(err)
		}
	}
	frames() // warm-up: every slot gets its planes
	if n := testing.AllocsPerRun(5, frames); n != 0 {
		t.Errorf("three passed-through frames and a flush: %v allocations, want 0", n)
	}
	if got, ok := f.LastCaptureUs(); !ok || got != us {
		t.Errorf("held frame at %d us (%v), want %d", got, ok, us)
	}
	if got, ok := f.PreviousCaptureUs(); !ok || got != us-33_333 {
		t.Errorf("frame before last at %d us (%v), want %d", got, ok, us-33_333)
	}
}

// Example-style check of the order rule, table driven: which capture times
// the deferred frames hold after a sequence of adds.
func TestDeferredKeepsTheFillersOrder(t *testing.T) {
	cases := []struct {
		name     string
		held     int64 // the Filler's held frame (0: none)
		adds     []int64
		wantKept []int64
	}{
		{"in order", 0, []int64{1, 2}, []int64{1, 2}},
		{"only as many as the Filler keeps", 0, []int64{1, 2, 3, 4, 5, 6, 7, 8, 9, 10}, []int64{3, 4, 5, 6, 7, 8, 9, 10}},
		{"same time replaces", 0, []int64{1, 2, 2}, []int64{1, 2}},
		{"older than the newest is dropped", 0, []int64{1, 3, 2}, []int64{1, 3}},
		{"older than the Filler's is dropped", 5, []int64{4, 6}, []int64{6}},
		{"same as the Filler's is kept", 5, []int64{5}, []int64{5}},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			var d deferred
			var pc picture
			for _, us := range tc.adds {
				d.add(&pc, us, tc.held, tc.held != 0)
			}
			var got []int64
			for i := range d.n {
				got = append(got, d.frames[i].captureUs)
			}
			if fmt.Sprint(got) != fmt.Sprint(tc.wantKept) {
				t.Errorf("kept %v, want %v", got, tc.wantKept)
			}
		})
	}
}

func newTestFilter(t *testing.T) *filter.Filter {
	f, err := filter.New(filter.Config{Model: filter.ModelCTRV})
	if err != nil {
		t.Fatal(err)
	}
	return f
}

// BenchmarkDeferredFlush720p measures what a gap's first tick pays for the
// frames that passed through unconverted after a run of at least eight:
// eight 1280x720 I420 to BGR conversions and the eight copies into the
// Filler (deferred.flush), per op.
func BenchmarkDeferredFlush720p(b *testing.B) {
	cam := predictor.Camera{Width: 1280, Height: 720, Fx: 1000, Fy: 1000, Cx: 640, Cy: 360, HeightM: 1.4, PitchDeg: 5}
	flt, err := filter.New(filter.Config{Model: filter.ModelCTRV})
	if err != nil {
		b.Fatal(err)
	}
	f, err := predictor.NewFiller(predictor.FillerConfig{Camera: cam, Policy: predictor.DefaultPolicy(), Motion: flt})
	if err != nil {
		b.Fatal(err)
	}
	defer f.Close()
	var d deferred
	defer d.close()
	n := len(d.frames)
	seq := movingSequence(b, n, cam.Width, cam.Height)
	pics := make([]picture, n)
	planes := make([]vp8.Image, n)
	for i, m := range seq {
		px, err := m.DataPtrUint8()
		if err == nil {
			err = vp8.BGRToI420(&planes[i], px, cam.Width, cam.Height)
		}
		if err != nil {
			b.Fatal(err)
		}
		m.Close()
	}
	us := int64(0)
	op := func() {
		b.StopTimer() // the decoder's work: planes into the pictures
		for i := range pics {
			if err := pics[i].img.Resize(cam.Width, cam.Height); err != nil {
				b.Fatal(err)
			}
			copy(pics[i].img.Y, planes[i].Y)
			copy(pics[i].img.U, planes[i].U)
			copy(pics[i].img.V, planes[i].V)
		}
		b.StartTimer()
		for i := range pics {
			us += 33_333
			held, have := f.LastCaptureUs()
			d.add(&pics[i], us, held, have)
		}
		if err := d.flush(f, cam.Width, cam.Height); err != nil {
			b.Fatal(err)
		}
	}
	op() // warm-up: the deferred slots and the scratch get their buffers
	b.ReportAllocs()
	b.ResetTimer()
	for range b.N {
		op()
	}
}

// TestDrainDoesNotAllocate: the display loop's drain, which runs before
// every tick, allocates nothing once its buffer has grown (here with
// telemetry queued, as it is between ticks now that samples do not wake
// the loop).
func TestDrainDoesNotAllocate(t *testing.T) {
	clock := &fakeClock{}
	r := testRelay(t, clock, "")
	v := newFakeVehicle(t, clock, 1, nil)
	p, err := newPipeline(r, v)
	if err != nil {
		t.Fatal(err)
	}
	defer p.close()
	us := int64(1_000_000)
	queue := func() {
		for range 5 {
			us += 20_000
			p.tel <- telEvent{sample: filter.Sample{TimeUs: us, SpeedMps: 5}, arrivalUs: us + 30_000}
		}
		p.drain()
	}
	queue() // warm-up: the buffer grows
	if n := testing.AllocsPerRun(10, queue); n != 0 {
		t.Errorf("drain of five telemetry samples: %v allocations, want 0", n)
	}
}
