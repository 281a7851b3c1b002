package relay

import (
	"errors"
	"math/rand/v2"
	"sync"
	"testing"
	"time"

	"stopgap/internal/display"
	"stopgap/stream/passthru"
	"stopgap/stream/rtpvp8"
	"stopgap/stream/vp8"
)

// TestPassThroughBadFrames sends damaged VP8 frames through the
// pass-through path: corrupt (data after the frame header replaced with
// random octets), truncated (cut inside the first partition, and cut
// inside the last partition) and bit-flipped (one bit in eight octets,
// anywhere).
// Whatever the damage, the session runs to its end without a crash, and a
// frame the relay could not use (its header fails the assembler's check, or
// the decoder rejects it) is never a LIVE tick, is followed by no forwarded
// frame until the vehicle's next keyframe, and ends the run of forwarded
// frames. Which damage the decoder notices is measured here, with a decoder
// of the test's own fed the same frames, not assumed: a damaged frame that
// libvpx decodes without complaint is LIVE in either mode (no decoder can
// tell), and is logged.
func TestPassThroughBadFrames(t *testing.T) {
	cases := []struct {
		name   string
		mangle func(rng *rand.Rand, f []byte) []byte
	}{
		{"corrupt", func(rng *rand.Rand, f []byte) []byte {
			for i := 3; i < len(f); i++ {
				f[i] = byte(rng.Uint32())
			}
			return f
		}},
		{"truncated in the first partition", func(_ *rand.Rand, f []byte) []byte {
			h, _ := rtpvp8.ParseFrameHeader(f)
			return f[:h.HeaderLen+h.FirstPartSize/2]
		}},
		{"truncated in the last partition", func(_ *rand.Rand, f []byte) []byte {
			h, _ := rtpvp8.ParseFrameHeader(f)
			rest := len(f) - h.HeaderLen - h.FirstPartSize
			return f[:len(f)-rest/2-1]
		}},
		{"bit-flipped", func(rng *rand.Rand, f []byte) []byte {
			// One bit in eight octets, anywhere (frame tag included).
			for range max(len(f)/8, 1) {
				f[rng.IntN(len(f))] ^= 1 << rng.IntN(8)
			}
			return f
		}},
	}
	// Frames 10, 14 and 30 are damaged; the vehicle answers keyframe
	// requests, so pass-through may resume in between.
	bad := map[int]bool{10: true, 14: true, 30: true}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			clock := &fakeClock{}
			r := testRelay(t, clock, "")
			v := newFakeVehicle(t, clock, 45, nil)

			// The test's own decoder sees exactly what the relay's sees.
			ref, err := vp8.NewDecoder()
			if err != nil {
				t.Fatal(err)
			}
			defer ref.Close()
			var img vp8.Image
			rng := rand.New(rand.NewPCG(1, uint64(len(tc.name))))
			var mu sync.Mutex
			unusable := map[int]bool{} // damaged frames the relay cannot use
			decodeOnly := 0            // of which only the decoder rejects (forwarded before it does)
			keyframes := map[int]bool{}
			v.mangle = func(i int, f []byte) []byte {
				if rtpvp8.IsKeyframe(f) {
					keyframes[i] = true
				}
				if bad[i] {
					f = tc.mangle(rng, f)
				}
				_, herr := rtpvp8.ParseFrameHeader(f)
				derr := ref.Decode(f, &img)
				if errors.Is(derr, vp8.ErrNotShown) {
					derr = nil
				}
				if bad[i] && (herr != nil || derr != nil) {
					mu.Lock()
					unusable[i] = true
					if herr == nil {
						decodeOnly++
					}
					mu.Unlock()
				}
				if bad[i] || derr != nil {
					t.Logf("frame %d: damaged %v, header %v, decode %v", i, bad[i], herr, derr)
				}
				return f
			}
			var trMu sync.Mutex
			live := map[int]FrameTrace{}
			r.TraceFrames(func(tr FrameTrace) {
				if tr.State != display.StateLive {
					return
				}
				for i := 0; i < 45; i++ {
					if captureUs(i) == tr.TickUs {
						trMu.Lock()
						live[i] = tr
						trMu.Unlock()
					}
				}
			})
			runSession(t, r, v)

			if len(unusable) == 0 {
				t.Fatalf("no damaged frame was unusable: the case tests nothing")
			}
			forwarded := 0
			for _, tr := range live {
				if tr.Forwarded {
					forwarded++
				}
			}
			if forwarded < 10 {
				t.Errorf("only %d LIVE frames passed through: the case does not exercise pass-through", forwarded)
			}
			for i := range unusable {
				if _, ok := live[i]; ok {
					t.Errorf("frame %d could not be used by the relay but its tick was LIVE", i)
				}
				for j := i + 1; j < 45 && !keyframes[j]; j++ {
					if tr, ok := live[j]; ok && tr.Forwarded {
						t.Errorf("frame %d passed through after unusable frame %d, before the next keyframe", j, i)
					}
				}
			}
			// Every forwarded frame became a LIVE tick, but for the damaged
			// frames the decoder alone rejected: those were forwarded
			// before their decode failed, and nothing after them was.
			st := r.gate.Stats()
			if extra := int(st.Forwarded) - forwarded; extra > decodeOnly {
				t.Errorf("%d forwarded frames never became LIVE ticks; only the %d damaged frames rejected by the decoder alone may", extra, decodeOnly)
			}
			stops := st.Stops[passthru.StopLoss] + st.Stops[passthru.StopDecodeFailed]
			if stops == 0 {
				t.Errorf("no run of forwarded frames ended for a loss or a decode failure: %+v", st)
			}
			t.Logf("unusable damaged frames %v of %v; LIVE ticks %d, passed through %d; gate %+v", unusable, bad, len(live), forwarded, st)
		})
	}
}

// TestSupersededFrameIsNotEncoded: after a gap the relay transcodes real
// frames until the vehicle's next keyframe. On a busy machine that keyframe
// can pass through while an older, not forwarded frame still waits for the
// display loop. The older frame's tick stays LIVE, but it is not encoded:
// it would reach the console after a newer picture and, as a frame of the
// relay's own, end the run the keyframe opened, so the frames after it
// would be transcoded too. Here frame 1 waits while keyframe 2 passes
// through; frames 2 and 3 pass through, and only the gap's own frame ended
// a run.
func TestSupersededFrameIsNotEncoded(t *testing.T) {
	r, p, done := pipelineOnFakeVehicle(t, Config{Camera: testCamera(), FPS: testFPS, LatencyMs: 50, FrameQueue: 4})
	defer done()
	var traces []FrameTrace
	r.TraceFrames(func(tr FrameTrace) { traces = append(traces, tr) })
	push := framePusher(t, p)
	p.onFrame(push(0, true))
	if !r.gate.Forwarding() {
		t.Fatal("the first keyframe did not open a run of forwarded frames")
	}
	// A gap: the display loop encodes a frame of its own.
	if !r.gate.BeginOwn() {
		t.Error("the gap's own frame after a forwarded one is not a keyframe")
	}
	r.gate.EndOwn()
	ev1 := push(1, false) // transcoding until the next keyframe: not forwarded
	ev2 := push(2, true)  // the vehicle's keyframe passes through meanwhile
	if ev1.forwarded || !ev2.forwarded {
		t.Fatalf("forwarded: frame 1 %v, keyframe 2 %v; want false, true", ev1.forwarded, ev2.forwarded)
	}
	encoded := r.met.encode.samples
	p.onFrame(ev1)
	p.onFrame(ev2)
	p.onFrame(push(3, false))
	if n := r.met.encode.samples - encoded; n != 0 {
		t.Errorf("%d frames encoded after keyframe 2 passed through, want 0", n)
	}
	st := r.gate.Stats()
	if st.Forwarded != 3 || st.Stops[passthru.StopOwnFrame] != 1 || !r.gate.Forwarding() {
		t.Errorf("gate %+v, forwarding %v: want frames 0, 2, 3 forwarded and one run ended (the gap)", st, r.gate.Forwarding())
	}
	if got := r.met.framesSuperseded.Load(); got != 1 {
		t.Errorf("frames_superseded %d, want 1", got)
	}
	want := []struct {
		tick                  int
		forwarded, superseded bool
	}{{0, true, false}, {1, false, true}, {2, true, false}, {3, true, false}}
	if len(traces) != len(want) {
		t.Fatalf("%d traces, want %d: %+v", len(traces), len(want), traces)
	}
	for k, w := range want {
		tr := traces[k]
		if tr.State != display.StateLive || tr.TickUs != captureUs(w.tick) || tr.Forwarded != w.forwarded || tr.Superseded != w.superseded {
			t.Errorf("trace %d: %v at %d us, forwarded %v, superseded %v; want LIVE at %d us, %v, %v",
				k, tr.State, tr.TickUs, tr.Forwarded, tr.Superseded, captureUs(w.tick), w.forwarded, w.superseded)
		}
	}
}

// TestOlderOwnFrameRefused: on a busy machine the vehicle's next frame can
// pass through while the display loop still fills the tick before it. The
// relay's picture for that older tick would reach the console after the
// newer real one and stand there under the next LIVE tick's meta; it is
// not sent (NOT_SHOWN), and the run of forwarded frames stays open.
func TestOlderOwnFrameRefused(t *testing.T) {
	nowUs := captureUs(0) // the receiver clock: tick deadlines are on it
	r, p, done := pipelineOnFakeVehicle(t, Config{Camera: testCamera(), FPS: testFPS, LatencyMs: 50, FrameQueue: 4,
		Now: func() time.Time { return time.UnixMicro(nowUs) }})
	defer done()
	var traces []FrameTrace
	r.TraceFrames(func(tr FrameTrace) { traces = append(traces, tr) })
	push := framePusher(t, p)
	p.onFrame(push(0, true))
	ev2 := push(2, false) // passes through before tick 1 is filled
	if !ev2.forwarded {
		t.Fatal("frame 2 did not pass through")
	}
	encoded := r.met.encode.samples
	// The display clock fills tick 1 first (14 ms after its deadline: no
	// overrun), then shows frame 2.
	nowUs = captureUs(2) + 51_000
	p.onFrame(ev2)
	if n := r.met.encode.samples - encoded; n != 0 {
		t.Errorf("%d frames encoded for tick 1, want 0", n)
	}
	st := r.gate.Stats()
	if st.RefusedOwn != 1 || st.Stops[passthru.StopOwnFrame] != 0 || !r.gate.Forwarding() {
		t.Errorf("gate %+v, forwarding %v: want one own frame refused and the run open", st, r.gate.Forwarding())
	}
	if rs := r.Stats(); rs.TicksNotShown != 1 || rs.TicksLive != 2 {
		t.Errorf("ticks: %d NOT_SHOWN, %d LIVE; want 1 and 2", rs.TicksNotShown, rs.TicksLive)
	}
	_ = traces
}

// framePusher returns push, which encodes frame i of a test pattern (a
// keyframe if key), sends its packets through p's ingest and returns its
// event, ready in time for its tick (latency 50 ms, allowance 20 ms).
func framePusher(t *testing.T, p *pipeline) (push func(i int, key bool) frameEvent) {
	t.Helper()
	enc, err := vp8.NewEncoder(vp8.EncoderConfig{Width: testW, Height: testH, FrameRateHz: testFPS, BitrateBps: 500_000})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { enc.Close() })
	pkz, err := rtpvp8.NewPacketizer(rtpvp8.PacketizerConfig{PayloadType: 96, SSRC: 0x1234})
	if err != nil {
		t.Fatal(err)
	}
	bgr := make([]byte, testW*testH*3)
	return func(i int, key bool) frameEvent {
		t.Helper()
		for j := range bgr {
			bgr[j] = byte(j*7 + i*13)
		}
		if key {
			enc.ForceKeyframe()
		}
		f, _, err := enc.EncodeBGR(nil, bgr, captureUs(i))
		if err != nil {
			t.Fatal(err)
		}
		pkts, err := pkz.Packetize(nil, f, rtpTS(i))
		if err != nil {
			t.Fatal(err)
		}
		p.in.mu.Lock()
		defer p.in.mu.Unlock()
		for j := range pkts {
			if err := p.in.asm.Push(&pkts[j], time.UnixMicro(captureUs(i))); err != nil {
				t.Fatal(err)
			}
		}
		ev := <-p.frames
		ev.readyUs = ev.captureUs + 51_000
		return ev
	}
}
