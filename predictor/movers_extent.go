package predictor

import (
	"image"
	"math"
)

// The body's growth (growScratch.extent): a pixel joins from a neighbour
// whose colour is within moverGrowNeighbour of its own and within
// moverGrowOrigin of the seed it was reached from (8-bit Lab, OpenCV's
// scaling), inside the region's box grown by moverGrowMargin of its size
// on every side, up to twice the box's area. A region is followed into the
// track frame only when its shift puts it at least moverTrackMinPx
// low-resolution pixels from where a static upright would be (nearer, the
// ±1 px of rounding cannot tell the two apart). Design choices.
const (
	moverGrowNeighbour = 6
	moverGrowOrigin    = 24
	moverGrowMargin    = 0.25
	moverTrackMinPx    = 1
)

// growScratch holds the queue and the visit stamps of the body's region
// growing, reused from region to region and frame to frame.
type growScratch struct {
	stamp  []int32
	origin []int32
	queue  []int32
	gen    int32
}

// extent returns the box of the thing's body in the newer frame, in
// low-resolution pixels: grown from the seeds, the changed pixels (raw
// non-zero) of region id (in box) that its own shift (sx, sy after af, into
// the older frame src) explains and that seed accepts, over neighbouring
// pixels of similar colour (labp, the newer frame in 8-bit Lab), not onto
// the road below the region's bottom where the compensated older frame c
// explains the newer one b. ok is false with fewer than 8 seeds.
func (g *growScratch) extent(labp, raw, src, b, c []byte, lab []int32, id int32, w, h int, box image.Rectangle, af affine, sx, sy, thr int, seed func(x, y int) bool) (image.Rectangle, bool) {
	if len(g.stamp) != w*h {
		g.stamp = make([]int32, w*h)
		g.origin = make([]int32, w*h)
		g.gen = 0
	}
	g.gen++
	gen := g.gen
	g.queue = g.queue[:0]
	mx, my := int(math.Ceil(moverGrowMargin*float64(box.Dx()))), int(math.Ceil(moverGrowMargin*float64(box.Dy())))
	lim := image.Rect(box.Min.X-mx, box.Min.Y-my, box.Max.X+mx, box.Max.Y+my).Intersect(image.Rect(0, 0, w, h))
	dist := func(p, q int) float64 {
		d0 := float64(labp[3*p]) - float64(labp[3*q])
		d1 := float64(labp[3*p+1]) - float64(labp[3*q+1])
		d2 := float64(labp[3*p+2]) - float64(labp[3*q+2])
		return math.Sqrt(d0*d0 + d1*d1 + d2*d2)
	}
	for y := box.Min.Y; y < box.Max.Y; y++ {
		yy := int(math.Round(af.k*float64(y)+af.oy)) + sy
		if yy < 0 || yy >= h {
			continue
		}
		for x := box.Min.X; x < box.Max.X; x++ {
			i := y*w + x
			if lab[i] != id || raw[i] == 0 {
				continue
			}
			xx := int(math.Round(af.k*float64(x)+af.ox)) + sx
			if xx < 0 || xx >= w || abs(int(b[i])-int(src[yy*w+xx])) >= thr || !seed(x, y) {
				continue
			}
			g.stamp[i], g.origin[i] = gen, int32(i)
			g.queue = append(g.queue, int32(i))
		}
	}
	if len(g.queue) < 8 {
		return image.Rectangle{}, false
	}
	capN := 2 * box.Dx() * box.Dy()
	var out image.Rectangle
	for k := 0; k < len(g.queue); k++ {
		p := int(g.queue[k])
		x, y := p%w, p/w
		out = out.Union(image.Rect(x, y, x+1, y+1))
		if len(g.queue) >= capN {
			continue
		}
		o := int(g.origin[p])
		for _, d := range [4][2]int{{1, 0}, {-1, 0}, {0, 1}, {0, -1}} {
			qx, qy := x+d[0], y+d[1]
			if !image.Pt(qx, qy).In(lim) {
				continue
			}
			q := qy*w + qx
			if g.stamp[q] == gen {
				continue
			}
			if qy >= box.Max.Y && abs(int(b[q])-int(c[q])) < thr/2 {
				continue // road the static model explains, below the foot
			}
			if dist(p, q) > moverGrowNeighbour || dist(o, q) > moverGrowOrigin {
				continue
			}
			g.stamp[q], g.origin[q] = gen, int32(o)
			g.queue = append(g.queue, int32(q))
		}
	}
	return out, true
}

// movingTwice returns a test of whether low-resolution pixel (x, y) of the
// newer frame b is found in the track frame mid where the region's
// velocity puts it (shift px, py after the static upright map af) and not
// where a static upright would be: the thing's own pixels, seen moving in
// both comparisons.
func movingTwice(mid, b []byte, w, h int, af affine, px, py, thr int) func(x, y int) bool {
	return func(x, y int) bool {
		xs, ys := int(math.Round(af.k*float64(x)+af.ox)), int(math.Round(af.k*float64(y)+af.oy))
		if xs < 0 || xs >= w || ys < 0 || ys >= h || xs+px < 0 || xs+px >= w || ys+py < 0 || ys+py >= h {
			return false
		}
		v := int(b[y*w+x])
		return abs(v-int(mid[(ys+py)*w+xs+px])) < thr && abs(v-int(mid[ys*w+xs])) >= thr
	}
}
