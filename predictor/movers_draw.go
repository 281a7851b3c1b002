package predictor

import (
	"image"
	"image/color"

	"gocv.io/x/gocv"
)

// Mover marks, our own look, consistent with the PREDICTED label (amber and
// black): the last known place is a rectangle of amber and black dashes
// with a small black-on-amber tag "MOVED"; the zone where the thing could be
// by now is a thin dashed amber rectangle around it, growing with the age.
const moverDashPx = 8

// DrawMovers draws the marks of movers into img (a frame of the Labeler's
// size, already labelled PREDICTED) for a picture ageMs old, clipped to the
// inside of the label border. It returns the number of marks drawn.
func (l *Labeler) DrawMovers(img *gocv.Mat, movers []Mover, ageMs float64) (int, error) {
	if l.closed {
		return 0, ErrClosed
	}
	if err := checkFrame("marked frame", img, l.w, l.h); err != nil {
		return 0, err
	}
	in := l.inner()
	n := 0
	for _, mv := range movers {
		box := mv.Box.Intersect(in)
		if box.Empty() {
			continue
		}
		zone := mv.Zone(ageMs).Intersect(in)
		dashedRect(img, zone, 1, amber, color.RGBA{}, false)
		dashedRect(img, box, max(2, l.thick+1), amber, black, true)
		tag := "MOVED"
		ts := gocv.GetTextSize(tag, gocv.FontHersheySimplex, l.scale*0.7, l.thick)
		pad := 2
		r := image.Rect(box.Min.X, box.Min.Y-ts.Y-2*pad, box.Min.X+ts.X+2*pad, box.Min.Y)
		if r.Min.Y < in.Min.Y {
			r = r.Add(image.Pt(0, in.Min.Y-r.Min.Y))
		}
		r = r.Intersect(in)
		if !r.Empty() {
			roi := img.Region(r)
			roi.SetTo(gocv.NewScalar(float64(amber.B), float64(amber.G), float64(amber.R), 0))
			gocv.PutTextWithParams(&roi, tag, image.Pt(pad, pad+ts.Y), gocv.FontHersheySimplex, l.scale*0.7, black, l.thick, gocv.LineAA, false)
			roi.Close()
		}
		n++
	}
	return n, nil
}

// dashedRect draws the outline of r in dashes of moverDashPx: colour a, and
// in the gaps colour b when alternate is set.
func dashedRect(img *gocv.Mat, r image.Rectangle, thick int, a, b color.RGBA, alternate bool) {
	if r.Dx() < 2 || r.Dy() < 2 {
		return
	}
	x0, y0, x1, y1 := r.Min.X, r.Min.Y, r.Max.X-1, r.Max.Y-1
	edges := [4][2]image.Point{{{x0, y0}, {x1, y0}}, {{x1, y0}, {x1, y1}}, {{x1, y1}, {x0, y1}}, {{x0, y1}, {x0, y0}}}
	for _, e := range edges {
		p, q := e[0], e[1]
		length := max(abs(q.X-p.X), abs(q.Y-p.Y))
		for s, k := 0, 0; s < length; s, k = s+moverDashPx, k+1 {
			c := a
			if k%2 == 1 {
				if !alternate {
					continue
				}
				c = b
			}
			t0, t1 := float64(s)/float64(length), float64(min(s+moverDashPx, length))/float64(length)
			pa := image.Pt(p.X+int(float64(q.X-p.X)*t0), p.Y+int(float64(q.Y-p.Y)*t0))
			pb := image.Pt(p.X+int(float64(q.X-p.X)*t1), p.Y+int(float64(q.Y-p.Y)*t1))
			gocv.Line(img, pa, pb, c, thick)
		}
	}
}

func abs(v int) int {
	if v < 0 {
		return -v
	}
	return v
}
