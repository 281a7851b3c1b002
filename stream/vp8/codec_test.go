package vp8

import (
	"testing"
)

func TestRoundTripPSNR(t *testing.T) {
	cases := []struct {
		name       string
		w, h       int
		bitrateBps int
		frames     int
		floorDB    float64
	}{
		// Floors: measured minimum was 36.3 dB (320x240) and 33.3 dB
		// (1280x720) with libvpx 1.12 on this content; floors leave ~3 dB
		// of margin for other libvpx builds.
		{"320x240", 320, 240, 800_000, 20, 33},
		{"1280x720", 1280, 720, 2_500_000, 10, 30},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			if testing.Short() && c.w > 640 {
				t.Skip("720p round trip skipped in -short")
			}
			s := encodeStream(t, EncoderConfig{Width: c.w, Height: c.h, BitrateBps: c.bitrateBps}, c.frames, 4)
			d := newTestDecoder(t, DecoderConfig{})
			out := &Image{}
			minDB := 1e9
			total := 0
			for i, f := range s.frames {
				total += len(f)
				if err := d.Decode(f, out); err != nil {
					t.Fatalf("frame %d: %v", i, err)
				}
				p := psnrY(s.src[i], out)
				// Negative control: the picture from 5 frames later must
				// score clearly lower, or the PSNR check proves nothing.
				if j := i + 5; j < len(s.src) && psnrY(s.src[j], out) > c.floorDB-5 {
					t.Errorf("frame %d: PSNR against frame %d is %.1f dB, the test content barely moves", i, j, psnrY(s.src[j], out))
				}
				if p < minDB {
					minDB = p
				}
			}
			t.Logf("%s: %d frames, %d bytes, min luma PSNR %.2f dB", c.name, len(s.frames), total, minDB)
			if minDB < c.floorDB {
				t.Errorf("min luma PSNR %.2f dB below floor %.1f dB", minDB, c.floorDB)
			}
		})
	}
}
