package relay

import (
	"errors"
	"math/rand/v2"
	"sync"
	"testing"

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
