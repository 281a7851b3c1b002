package relay

import (
	"errors"
	"math"
	"math/rand/v2"
	"path/filepath"
	"testing"

	"stopgap/stream/recording"
	"stopgap/stream/vp8"
)

// TestDamagedFramesNeverLive sends sessions in which some frames are
// damaged on their way to the relay (a keyframe and inter frames; cut
// short, bits flipped, replaced by random bytes, a one-byte frame) and
// checks through the relay's outputs only (Run, Offer, the recording's
// ticks.csv) that no frame the relay could not decode is shown as LIVE,
// and that the relay survives. Which frames are undecodable is decided
// independently of the relay: the frames exactly as sent are decoded in
// order by a fresh vp8.Decoder; a frame it rejects, and every inter frame
// after it until the next keyframe (their references are gone), must be
// PREDICTED or STALE.
//
// libvpx accepts some damaged frames without an error or its corrupt flag
// (VP8 has no checksum); such frames are decodable by definition here and
// are counted in the log. On a real link SRTP's authentication tag
// (RFC 3711) rejects any packet changed in transit, so undetected damage
// can only come from the vehicle's own encoder.
func TestDamagedFramesNeverLive(t *testing.T) {
	const frames = 60
	damaged := map[int]bool{0: true, 12: true, 13: true, 25: true, 40: true, 47: true}
	cases := []struct {
		name   string
		damage func(rng *rand.Rand, f []byte) []byte
	}{
		{"truncated to a third", func(_ *rand.Rand, f []byte) []byte { return f[:len(f)/3] }},
		{"truncated to 10 bytes", func(_ *rand.Rand, f []byte) []byte { return f[:min(len(f), 10)] }},
		{"one byte", func(_ *rand.Rand, f []byte) []byte { return f[:1] }},
		{"8 bits flipped after the header", func(rng *rand.Rand, f []byte) []byte {
			for range 8 {
				if len(f) > 10 {
					i := 10 + rng.IntN(len(f)-10)
					f[i] ^= 1 << rng.IntN(8)
				}
			}
			return f
		}},
		{"random bytes", func(rng *rand.Rand, f []byte) []byte {
			for i := range f {
				f[i] = byte(rng.Uint32())
			}
			return f
		}},
		{"header bits flipped", func(rng *rand.Rand, f []byte) []byte {
			f[rng.IntN(min(len(f), 10))] ^= 1 << rng.IntN(8)
			return f
		}},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			rng := rand.New(rand.NewPCG(7, 7))
			clock := &fakeClock{}
			dir := filepath.Join(t.TempDir(), "rec")
			r := testRelay(t, clock, dir)
			v := newFakeVehicle(t, clock, frames, nil)
			v.mutate = func(i int, f []byte) []byte {
				f = append([]byte(nil), f...)
				if damaged[i] {
					f = tc.damage(rng, f)
				}
				return f
			}
			runSession(t, r, v)
			// Tick k of ticks.csv is row k of frames.csv; its capture time
			// names the vehicle frame it stands for.
			ticks := readTicks(t, dir)
			rec, err := recording.Open(dir)
			if err != nil {
				t.Fatal(err)
			}
			states := map[int]string{}
			for k, f := range rec.Frames {
				if k < len(ticks) {
					states[int(math.Round(float64(f.CaptureUs-testVehicleT0Us)*testFPS/1e6))] = ticks[k]
				}
			}

			dec, err := vp8.NewDecoder()
			if err != nil {
				t.Fatal(err)
			}
			defer dec.Close()
			var img vp8.Image
			rejected, silent, live := 0, 0, 0
			for i, f := range v.sent {
				err := dec.Decode(f, &img)
				if err == nil && damaged[i] {
					silent++
				}
				if err == nil {
					if states[i] == "LIVE" {
						live++
					}
					continue
				}
				if !errors.Is(err, vp8.ErrNotShown) {
					rejected++
				}
				if states[i] == "LIVE" {
					t.Errorf("frame %d (damaged %v) is undecodable (%v) but was shown LIVE", i, damaged[i], err)
				}
			}
			if len(states) < frames-5 {
				t.Errorf("%d ticks recorded of %d frames", len(states), frames)
			}
			t.Logf("%d frames sent, %d damaged: %d frames undecodable (damaged or after one), %d damaged frames accepted by libvpx without error, %d LIVE ticks of %d; relay %+v",
				len(v.sent), len(damaged), rejected, silent, live, len(states), r.Stats())
		})
	}
}
