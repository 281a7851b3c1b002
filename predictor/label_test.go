package predictor

import (
	"errors"
	"testing"

	"gocv.io/x/gocv"
)

// TestLabelFractionMatchesChangedPixels: on a random-noise image every
// pixel the label overwrites changes (unless it happens to equal the label
// colour, probability about 2^-24 per pixel), so the reported fraction must
// match the brute-force count of changed pixels, and nothing outside the
// reported area may change.
func TestLabelFractionMatchesChangedPixels(t *testing.T) {
	for _, size := range [][2]int{{320, 180}, {1280, 720}, {64, 48}} {
		w, h := size[0], size[1]
		l, err := NewLabeler(w, h)
		if err != nil {
			t.Fatal(err)
		}
		for _, st := range []State{StatePredicted, StateStale} {
			src := noiseFrame(t, w, h, 3)
			img := src.Clone()
			frac, err := l.Draw(&img, st, 123.4, 0.876)
			if err != nil {
				t.Fatal(err)
			}
			a, b := bytesOf(t, src), bytesOf(t, img)
			changed := 0
			for i := 0; i < len(a); i += 3 {
				if a[i] != b[i] || a[i+1] != b[i+1] || a[i+2] != b[i+2] {
					changed++
				}
			}
			covered := int(frac*float64(w*h) + 0.5)
			if changed > covered || covered-changed > 2 {
				t.Errorf("%dx%d %v: label reports %d pixels, %d changed", w, h, st, covered, changed)
			}
			if frac <= 0 || (w >= 320 && frac > 0.35) || frac >= 1 {
				t.Errorf("%dx%d %v: implausible label fraction %g", w, h, st, frac)
			}
			src.Close()
			img.Close()
		}
		l.Close()
	}
}

// TestLabelLooks checks the pattern: a PREDICTED border has amber and
// black stripes, a STALE border is red, and the text box contains text
// pixels of the text colour.
func TestLabelLooks(t *testing.T) {
	const w, h = 320, 180
	l, err := NewLabeler(w, h)
	if err != nil {
		t.Fatal(err)
	}
	defer l.Close()
	img := constFrame(w, h, 90)
	defer img.Close()
	if _, err := l.Draw(&img, StatePredicted, 40, 0.9); err != nil {
		t.Fatal(err)
	}
	b := bytesOf(t, img)
	px := func(x, y int) [3]byte { i := 3 * (y*w + x); return [3]byte{b[i], b[i+1], b[i+2]} }
	amberN, blackN := 0, 0
	for x := 0; x < w; x++ {
		switch px(x, 1) {
		case amberBGR:
			amberN++
		case stripeDark:
			blackN++
		}
	}
	if amberN < w/4 || blackN < w/4 {
		t.Errorf("top border row: %d amber, %d black pixels; want stripes", amberN, blackN)
	}
	bw := BorderPx(h)
	textN := 0
	for y := bw; y < bw+40; y++ {
		for x := bw; x < w/2; x++ {
			// Anti-aliased strokes: count clearly amber-ish pixels (R high, B low).
			if p := px(x, y); p[2] > 150 && p[0] < 60 {
				textN++
			}
		}
	}
	if textN < 20 {
		t.Errorf("only %d amber text pixels in the PREDICTED box", textN)
	}
	if _, err := l.Draw(&img, StateStale, 900, 0.1); err != nil {
		t.Fatal(err)
	}
	b = bytesOf(t, img)
	if got := px(w/2, 1); got != [3]byte{0, 0, 220} {
		t.Errorf("STALE border pixel %v, want red", got)
	}
}

func TestLabelRefusesLive(t *testing.T) {
	l, err := NewLabeler(64, 48)
	if err != nil {
		t.Fatal(err)
	}
	defer l.Close()
	img := noiseFrame(t, 64, 48, 9)
	defer img.Close()
	before := append([]byte(nil), bytesOf(t, img)...)
	for _, st := range []State{StateLive, StateInvalid} {
		if _, err := l.Draw(&img, st, 0, 1); !errors.Is(err, ErrInvalidConfig) {
			t.Errorf("%v: got %v, want refusal", st, err)
		}
	}
	after := bytesOf(t, img)
	for i := range before {
		if before[i] != after[i] {
			t.Fatal("a refused label changed the image")
		}
	}
	wrong := gocv.NewMatWithSize(48, 64, gocv.MatTypeCV8U)
	defer wrong.Close()
	if _, err := l.Draw(&wrong, StateStale, 0, 0); !errors.Is(err, ErrFrameFormat) {
		t.Errorf("grey image: %v", err)
	}
	if _, err := NewLabeler(6, 6); !errors.Is(err, ErrInvalidConfig) {
		t.Errorf("tiny labeler: %v", err)
	}
}
