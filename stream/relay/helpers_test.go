package relay

import (
	"context"
	"io"
	"log/slog"
	"math"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/pion/rtp"

	"stopgap/predictor"
	"stopgap/stream/ingest"
	"stopgap/stream/rtpvp8"
	"stopgap/stream/telemetry"
	"stopgap/stream/vp8"
	"stopgap/stream/whip"
)

const (
	testIngestToken  = "ingest-token-0123456789abcdef"
	testConsoleToken = "console-token-0123456789abcdef"
	testW, testH     = 320, 240
	testFPS          = 30
	testLatencyUs    = 50_000
	testVehicleT0Us  = 1_700_000_000_000_000 // vehicle clock at frame 0, Unix µs
)

func testCamera() predictor.Camera {
	return predictor.Camera{Width: testW, Height: testH, Fx: 280, Fy: 280, Cx: 160, Cy: 120, HeightM: 1.4, PitchDeg: 6}
}

func quietLogger() *slog.Logger { return slog.New(slog.NewTextHandler(io.Discard, nil)) }

// fakeClock is the receiver clock of a test: it reads the arrival time of the
// latest packet the fake session handed out, so processing takes no time.
type fakeClock struct{ us atomic.Int64 }

func (c *fakeClock) Now() time.Time { return time.UnixMicro(c.us.Load()) }

// idleTimer never fires: deadlines are then handled only when later frames
// arrive, which keeps the tests deterministic.
type idleTimer struct{}

func (idleTimer) C() <-chan time.Time  { return nil }
func (idleTimer) Reset(time.Duration)  {}
func (idleTimer) Stop() bool           { return true }
func newIdleTimer(time.Duration) Timer { return idleTimer{} }

// fakeVehicle is an ingest.Session that encodes synthetic frames on demand,
// packetises them and delivers them with arrival times on the fake clock.
// Frames whose index is in drop never arrive. A keyframe request makes the
// next encoded frame a keyframe.
type fakeVehicle struct {
	t      testing.TB
	clock  *fakeClock
	frames int
	drop   func(i int) bool
	noSR   bool
	// srFrom is the first frame delivered after the vehicle's first RTCP
	// sender report: frames before it are anchored to their arrival.
	srFrom int
	// extraUs, if set, adds a delay to frame i on the link.
	extraUs func(i int) int64
	// mutate, if set, returns what is sent for frame i instead of the
	// encoder's output (a copy; damaged frames for fault tests), and sent
	// keeps every frame as sent, by index.
	mutate func(i int, frame []byte) []byte
	sent   [][]byte
	// mangle, if set, may damage frame i's VP8 data before it is
	// packetised (it returns the data to send).
	mangle func(i int, frame []byte) []byte
	// lateCaptureUs, if set, makes frame i captured (RTP timestamp) and
	// sent that many µs after its nominal time: a sender's capture jitter.
	lateCaptureUs func(i int) int64
	// skip, if set, names frames the sender never captures (no packets,
	// no gap in the sequence numbers: not a loss).
	skip func(i int) bool
	// keyErr, if set, is what RequestKeyframe returns (nothing is sent).
	keyErr error

	enc  *vp8.Encoder
	pkz  *rtpvp8.Packetizer
	bgr  []byte
	buf  []byte
	pkts []rtp.Packet
	arr  []int64
	next int // next frame to generate

	tel  chan ingest.TelemetryBytes
	done chan struct{}
	once sync.Once

	mu         sync.Mutex
	keyReqs    []int // frame index being delivered when a PLI came
	delivering int
	forceKey   bool
	keyframes  []int // frames encoded as keyframes
}

func newFakeVehicle(t testing.TB, clock *fakeClock, frames int, drop func(int) bool) *fakeVehicle {
	enc, err := vp8.NewEncoder(vp8.EncoderConfig{Width: testW, Height: testH, FrameRateHz: testFPS, BitrateBps: 500_000})
	if err != nil {
		t.Fatal(err)
	}
	pkz, err := rtpvp8.NewPacketizer(rtpvp8.PacketizerConfig{PayloadType: 96, SSRC: 0x1234, FirstSeq: 65500})
	if err != nil {
		t.Fatal(err)
	}
	v := &fakeVehicle{t: t, clock: clock, frames: frames, drop: drop, enc: enc, pkz: pkz,
		bgr: make([]byte, testW*testH*3), tel: make(chan ingest.TelemetryBytes, 4096), done: make(chan struct{})}
	t.Cleanup(func() { enc.Close() })
	return v
}

func captureUs(i int) int64 { return testVehicleT0Us + int64(math.Round(float64(i)*1e6/testFPS)) }

func rtpTS(i int) uint32 { return uint32(1000 + int64(i)*90000/testFPS) }

// generate encodes frame i and queues its packets (if it is not dropped) and
// the telemetry sample taken with it.
func (v *fakeVehicle) generate(i int) {
	// A textured picture that slides one pixel per frame.
	for y := 0; y < testH; y++ {
		for x := 0; x < testW; x++ {
			o := (y*testW + x) * 3
			v.bgr[o] = byte((x + i) * 7)
			v.bgr[o+1] = byte(y*5 + ((x+i)/16)*40)
			v.bgr[o+2] = byte((x + y + i) * 3)
		}
	}
	v.mu.Lock()
	if v.forceKey {
		v.enc.ForceKeyframe()
		v.forceKey = false
	}
	v.mu.Unlock()
	frame, key, err := v.enc.EncodeBGR(v.buf[:0], v.bgr, captureUs(i))
	if err != nil {
		v.t.Error(err)
		return
	}
	v.buf = frame
	if key {
		v.mu.Lock()
		v.keyframes = append(v.keyframes, i)
		v.mu.Unlock()
	}
	if v.mutate != nil {
		frame = v.mutate(i, frame)
		v.sent = append(v.sent, frame)
	}
	if v.mangle != nil {
		frame = v.mangle(i, append([]byte(nil), frame...))
	}
	ts, capUs := rtpTS(i), captureUs(i)
	if v.lateCaptureUs != nil {
		d := v.lateCaptureUs(i)
		ts += uint32(d * 9 / 100)
		capUs += d
	}
	pk, err := v.pkz.Packetize(nil, frame, ts)
	if err != nil {
		v.t.Error(err)
		return
	}
	arrival := capUs + testLatencyUs
	if v.extraUs != nil {
		arrival += v.extraUs(i)
	}
	if v.drop != nil && v.drop(i) {
		return
	}
	for j := range pk {
		p := pk[j]
		p.Payload = append([]byte(nil), p.Payload...)
		v.pkts = append(v.pkts, p)
		v.arr = append(v.arr, arrival+int64(j)*200)
	}
	m := telemetry.Message{TimeUs: captureUs(i), SpeedMps: 8, YawRateRps: 0.05}
	b, _ := telemetry.Encode(m)
	v.tel <- ingest.TelemetryBytes{Data: b, Arrival: time.UnixMicro(arrival)}
}

func (v *fakeVehicle) ReadRTP(ctx context.Context) (*rtp.Packet, time.Time, error) {
	for len(v.pkts) == 0 {
		if v.next >= v.frames {
			v.end()
			return nil, time.Time{}, whip.ErrSessionClosed
		}
		if v.skip != nil && v.skip(v.next) {
			v.next++
			continue
		}
		v.mu.Lock()
		v.delivering = v.next
		v.mu.Unlock()
		v.generate(v.next)
		v.next++
	}
	p, a := v.pkts[0], v.arr[0]
	v.pkts, v.arr = v.pkts[1:], v.arr[1:]
	v.clock.us.Store(a)
	return &p, time.UnixMicro(a), nil
}

func (v *fakeVehicle) end() {
	v.once.Do(func() { close(v.tel); close(v.done) })
}

func (v *fakeVehicle) Telemetry() <-chan ingest.TelemetryBytes { return v.tel }

func (v *fakeVehicle) RequestKeyframe() error {
	v.mu.Lock()
	defer v.mu.Unlock()
	if v.keyErr != nil {
		return v.keyErr
	}
	v.keyReqs = append(v.keyReqs, v.delivering)
	v.forceKey = true
	return nil
}

// SenderReport maps RTP timestamps to the vehicle clock exactly (frame 0's
// timestamp at its capture time).
func (v *fakeVehicle) SenderReport() (ingest.SenderReport, bool) {
	v.mu.Lock()
	before := v.delivering < v.srFrom
	v.mu.Unlock()
	if v.noSR || before {
		return ingest.SenderReport{}, false
	}
	return ingest.SenderReport{SSRC: 0x1234, NTPTime: ingest.UnixUsToNTP(captureUs(0)), RTPTime: rtpTS(0)}, true
}

func (v *fakeVehicle) Stats() ingest.Stats   { return ingest.Stats{} }
func (v *fakeVehicle) Done() <-chan struct{} { return v.done }
func (v *fakeVehicle) Close() error          { v.end(); return nil }
func (v *fakeVehicle) ID() string            { return "fakevehicle0001" }

// testRelay returns a relay on the fake clock.
func testRelay(t testing.TB, clock *fakeClock, recordDir string) *Relay {
	r, err := New(Config{
		FPS: testFPS, Camera: testCamera(), RecordDir: recordDir,
		IngestToken: testIngestToken, ConsoleToken: testConsoleToken,
		Logger: quietLogger(), Now: clock.Now, NewTimer: newIdleTimer,
		// The fake clock jumps ahead and the loop fills ticks in batches.
		DrawOverdue: true,
		// The fake vehicle runs faster than real time; room for every
		// frame keeps the display loop from dropping any.
		FrameQueue: 64,
	})
	if err != nil {
		t.Fatal(err)
	}
	if r.rec != nil {
		r.rec.maxMats = 1 << 20 // the fake vehicle outruns the JPEG encoder
	}
	return r
}

// runSession serves v with Run and shuts the relay down once v ended.
func runSession(t testing.TB, r *Relay, v *fakeVehicle) {
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	done := make(chan error, 1)
	go func() { done <- r.Run(ctx) }()
	r.Offer(v)
	select {
	case <-v.done:
	case <-time.After(60 * time.Second):
		t.Fatal("session did not end")
	}
	// Wait until the relay finished serving it.
	deadline := time.Now().Add(30 * time.Second)
	for r.Stats().Active || r.Stats().Sessions == 0 {
		if time.Now().After(deadline) {
			t.Fatal("relay still serving")
		}
		time.Sleep(5 * time.Millisecond)
	}
	cancel()
	if err := <-done; err != nil {
		t.Fatalf("Run: %v", err)
	}
}

// pipelineOnFakeVehicle builds a relay from cfg (with the test tokens, a
// quiet logger and loopback-only WHIP) and a display pipeline for a fake
// vehicle that sends nothing, for tests that drive the pipeline's methods
// themselves. done closes both.
func pipelineOnFakeVehicle(t testing.TB, cfg Config) (r *Relay, p *pipeline, done func()) {
	t.Helper()
	cfg.IngestToken, cfg.ConsoleToken, cfg.Logger = testIngestToken, testConsoleToken, quietLogger()
	cfg.Whip = whip.Config{Network: whip.Network{LoopbackOnly: true}}
	r, err := New(cfg)
	if err != nil {
		t.Fatal(err)
	}
	p, err = newPipeline(r, newFakeVehicle(t, &fakeClock{}, 0, nil))
	if err != nil {
		r.shutdown()
		t.Fatal(err)
	}
	return r, p, func() { p.close(); r.shutdown() }
}
