package e2e

import (
	"math"
	"testing"
)

// TestLumaBT601 checks the luma matrix against the 100 % colour bars in
// 8-bit studio range, Y' of white, yellow, cyan, green, magenta, red, blue
// and black: 235, 210, 170, 145, 106, 81, 41, 16 (the values of the
// BT.601 colour-bar tables, written here from memory), within half a level.
func TestLumaBT601(t *testing.T) {
	bars := []struct {
		name    string
		r, g, b byte
		want    float64
	}{
		{"white", 255, 255, 255, 235}, {"yellow", 255, 255, 0, 210}, {"cyan", 0, 255, 255, 170},
		{"green", 0, 255, 0, 145}, {"magenta", 255, 0, 255, 106}, {"red", 255, 0, 0, 81},
		{"blue", 0, 0, 255, 41}, {"black", 0, 0, 0, 16},
	}
	m := lumaBT601
	for _, c := range bars {
		y := m.Offset + m.Kr*float64(c.r) + m.Kg*float64(c.g) + m.Kb*float64(c.b)
		if math.Abs(y-c.want) > 0.5 {
			t.Errorf("%s: Y' %.2f, want %.0f", c.name, y, c.want)
		}
	}
}

// TestCompareLuma: a grey picture whose luma is the reference's within
// rounding passes; clipped pixels are left out and counted; a picture
// off by 10 levels, or one mostly clipped, fails the tolerance.
func TestCompareLuma(t *testing.T) {
	const w, h = 8, 4
	ref := make([]byte, w*h)
	page := pagePicture{W: w, H: h, RGB: make([]byte, 3*w*h)}
	grey := func(i int, v byte) { page.RGB[3*i], page.RGB[3*i+1], page.RGB[3*i+2] = v, v, v }
	for i := range ref {
		v := byte(40 + 5*i) // grey R'=G'=B'=v has Y' = 16 + 219 v / 255
		grey(i, v)
		ref[i] = byte(math.Round(16 + 219*float64(v)/255))
	}
	d, err := compareLuma(page, ref, lumaBT601)
	if err != nil {
		t.Fatal(err)
	}
	if !d.within(pixTol) || d.MeanAbs > 0.5 || d.Clipped != 0 {
		t.Errorf("same picture: %v", d)
	}

	grey(0, 255) // clipped: left out however far off
	grey(1, 0)
	if d, _ = compareLuma(page, ref, lumaBT601); d.Clipped != 2.0/(w*h) || d.MeanAbs > 0.5 || d.AllMeanAbs <= d.MeanAbs {
		t.Errorf("two clipped pixels: %v", d)
	}

	off := append([]byte(nil), ref...)
	for i := range off {
		off[i] += 10
	}
	if d, _ = compareLuma(page, off, lumaBT601); d.within(pixTol) || math.Abs(d.MeanAbs-10) > 0.5 {
		t.Errorf("10 levels off: %v, want a mean of 10 outside the tolerance", d)
	}

	for i := 0; i < w*h*3/4; i++ {
		grey(i, 0)
	}
	if d, _ = compareLuma(page, ref, lumaBT601); d.within(pixTol) {
		t.Errorf("three quarters clipped: %v, want outside the tolerance", d)
	}
	if _, err := compareLuma(page, ref[:5], lumaBT601); err == nil {
		t.Error("reference of the wrong size accepted")
	}
}
