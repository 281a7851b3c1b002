package predictor

import (
	"fmt"
	"image"
	"math"

	"gocv.io/x/gocv"

	"stopgap/filter"
)

// placeMarks appends to dst the movers of the held frame as they are
// marked on a predicted frame made with motion m (held frame -> target)
// and returns it: each last known place moves as a static upright standing
// where the thing stands would, so the mark sits where the thing would be
// had it stopped. A box whose bottom edge is on the road (below the
// horizon) follows the road map of its two bottom corners and is scaled by
// the change of their distance; one above the horizon follows the far map
// of its centre. The apparent velocity is scaled with the box. The picture
// itself moves the thing's pixels as static scene (the road map smears a
// thing standing on the road), so each mark also keeps where the picture
// shows its held box (Mover.Shown, shownBox, with the upright structure up
// the synthesis used; nil for none). Lens distortion is ignored here
// (marks are zones, not pixels). Ticks pass f.marks[:0]: no allocation
// once it has grown to the number of movers.
func (f *Filler) placeMarks(dst, movers []Mover, m filter.Motion, farDepthM float64, up *UprightModel) []Mover {
	c := f.cfg.Camera
	road := GroundHomographyPlanar(c, m.DxM, m.DyM, m.DyawRad)
	far := FarHomographyPlanar(c, m.DxM, m.DyM, m.DyawRad, farDepthM)
	hz := c.Horizon()
	for _, mv := range movers {
		b := mv.Box
		x0, x1, yb := float64(b.Min.X), float64(b.Max.X), float64(b.Max.Y)
		k, ax, ay := 1.0, 0.0, 0.0 // scale, and where the bottom-left corner goes
		placed := false
		if hz.SignedDistance(x0, yb) > 0 && hz.SignedDistance(x1, yb) > 0 {
			u0, v0, ok0 := road.Apply(x0, yb)
			u1, v1, ok1 := road.Apply(x1, yb)
			if ok0 && ok1 && x1 > x0 {
				if s := math.Hypot(u1-u0, v1-v0) / (x1 - x0); s > 0.25 && s < 4 {
					k, ax, ay, placed = s, u0, (v0+v1)/2, true
				}
			}
		}
		if !placed {
			cx, cy := (x0+x1)/2, float64(b.Min.Y+b.Max.Y)/2
			u, v, ok := far.Apply(cx, cy)
			if !ok {
				u, v = cx, cy
			}
			ax, ay = x0+u-cx, yb+v-cy
		}
		w, h := k*(x1-x0), k*float64(b.Dy())
		box := image.Rect(int(math.Floor(ax)), int(math.Floor(ay-h)), int(math.Ceil(ax+w)), int(math.Ceil(ay)))
		dst = append(dst, Mover{Box: box, VxPxPerS: k * mv.VxPxPerS, VyPxPerS: k * mv.VyPxPerS,
			Shown: shownBox(c, m, road, far, up, b)})
	}
	return dst
}

// HeldMovers returns the movers found in the held frame (held-frame
// pixels, Shown empty), as the gap's first PREDICTED tick or Prepare found
// them, or nil when none were found or neither has run for the held frame.
// The slice is the Filler's and is valid until its next call.
func (f *Filler) HeldMovers() []Mover {
	if !f.moversKnown || f.moversFor != f.lastUs || len(f.movers.Movers) == 0 {
		return nil
	}
	return f.movers.Movers
}

// PlaceMarks appends to dst the held-frame movers ms as a PREDICTED tick
// with motion m (held frame -> target) would mark them, with the far depth
// and upright structure estimated for the held frame, and returns it.
// PlaceMarks(nil, f.HeldMovers(), tick.Motion) is what f.Marks() holds
// after that tick; a diagnosis passes boxes of its own (for example the
// true places of the road users of a simulated drive) to see how marks
// placed from them would score. It fails with ErrNoFrame before the first
// real frame.
func (f *Filler) PlaceMarks(dst, ms []Mover, m filter.Motion) ([]Mover, error) {
	if f.closed {
		return dst, ErrClosed
	}
	if !f.have {
		return dst, ErrNoFrame
	}
	d := f.farDepthFor()
	return f.placeMarks(dst, ms, m, d, f.uprightModel(d)), nil
}

// Marks returns the movers as marked on the last tick, in its pixels
// (Box, and Zone(Tick.AgeMs) around it), or nil when the last tick drew no
// marks. The slice is the Filler's and is valid until its next call.
func (f *Filler) Marks() []Mover {
	if len(f.marks) == 0 {
		return nil
	}
	return f.marks
}

// LabelArea returns where the label of a PREDICTED or STALE tick leaves the
// picture visible: the area inside the border, and the text box within it
// that the label covers on the last tick (empty before any).
func (f *Filler) LabelArea() (inner, text image.Rectangle) {
	return f.label.inner(), f.label.lastBox
}

// WarpAsShown writes to dst the image src (camera-sized CV_8UC3) warped as
// the held frame is on a PREDICTED ground-method tick with motion m: the
// same far depth and upright structure (estimated for the held frame). The
// replay warps the mask of where moving things were in the held frame with
// it, to know where the predicted picture shows them. dst is owned by the
// caller. It fails with ErrNoFrame before the first real frame.
func (f *Filler) WarpAsShown(src gocv.Mat, m filter.Motion, dst *gocv.Mat) (Synthesis, error) {
	if f.closed {
		return Synthesis{}, ErrClosed
	}
	if !f.have {
		return Synthesis{}, ErrNoFrame
	}
	if !matUsable(dst) {
		return Synthesis{}, fmt.Errorf("destination is nil or a zero gocv.Mat; create it with gocv.NewMat(): %w", ErrFrameFormat)
	}
	d := f.farDepthFor()
	return f.synth.SynthesizeScene(src, m, d, f.uprightModel(d), dst)
}

// Prepare makes now, if not made yet, the per-gap estimates for the held
// frame that a gap's first PREDICTED tick would otherwise make: the far
// depth, the upright structure and the movers, from the held frame and the
// one before it. It changes nothing the ticks show (they use the same
// estimates either way); it only moves their cost. Call it right after
// Live has taken a new frame and the frame is on its way to the display,
// so a gap's first predicted frame costs no more than the next one: the
// estimates cost about as much as several frames' warps (see
// BenchmarkGapVsBare1280x720, "prepare/bare"), so calling it for every real
// frame spends that on every frame. Without a frame before the held one it
// does nothing.
func (f *Filler) Prepare() {
	if f.closed || !f.have || !f.havePrev {
		return
	}
	d := f.farDepthFor()
	up := f.uprightModel(d)
	f.moverModel(d, up)
}

// Warm makes the buffers a gap's first PREDICTED tick would otherwise
// allocate on the spot: the far-depth, upright and mover estimators' scratch
// images and tables and the synthesis scratch, sized for the camera. It runs
// them once on the Filler's own blank frames with a made-up motion (1 m
// ahead over one 30 fps frame period) and keeps none of their results, so
// it changes nothing any tick shows. Without it the first gap of a Filler
// paid about 0.09 s of CPU more than later gaps at 1280x720 (page faults of
// fresh images, slices growing), enough to push a busy relay's next tick
// past its deadline. It may be called only before the first real frame;
// later it does nothing. The relay calls it when it creates a Filler.
func (f *Filler) Warm() error {
	if f.closed {
		return ErrClosed
	}
	if f.have {
		return nil
	}
	c := f.cfg.Camera
	m := filter.Motion{T0Us: 0, T1Us: 33_333, DxM: 1, Cov: [3][3]float64{{1e-4, 0, 0}, {0, 1e-4, 0}, {0, 0, 1e-6}}}
	d := math.Inf(1)
	if !f.cfg.FarDepth.Off {
		if est, err := f.depth.Estimate(f.prev, f.last, c, m); err == nil {
			d = est
		}
	}
	var up *UprightModel
	if !f.cfg.Upright.Off {
		if err := f.uprightEst.Estimate(f.prev, f.last, c, m, d, &f.upright); err == nil {
			up = &f.upright
		}
	}
	if !f.cfg.Movers.Off {
		if err := f.moverDet.Detect(f.prev, f.last, c, m, d, up, f.uprightEst, &f.movers); err != nil {
			f.movers.Movers = f.movers.Movers[:0]
		}
	}
	dst := gocv.NewMat()
	defer dst.Close()
	_, err := f.synth.SynthesizeScene(f.last, m, d, up, &dst)
	// Nothing estimated here belongs to a real frame.
	f.upright.Segments, f.movers.Movers = f.upright.Segments[:0], f.movers.Movers[:0]
	f.farKnown, f.uprightKnown, f.moversKnown = false, false, false
	return err
}

// shownBox returns where the predicted picture made with motion m (held
// frame -> target) shows the held frame's box b: the bounding box of its
// corners and edge midpoints (3x3 points), each moved by the map the
// synthesis moves the static scene there with: the plane of the upright
// segment of up (nil for none) that holds the point, else the road map
// road below the horizon and the far map far above it. A thing standing
// on the road is smeared by the road map: its top moves as far road, its
// foot as near road, so the picture shows it elsewhere than an upright at
// its foot would stand. Empty if no point maps.
func shownBox(c Camera, m filter.Motion, road, far Homography, up *UprightModel, b image.Rectangle) image.Rectangle {
	hz := c.Horizon()
	var out image.Rectangle
	xs := [3]float64{float64(b.Min.X), float64(b.Min.X+b.Max.X-1) / 2, float64(b.Max.X - 1)}
	ys := [3]float64{float64(b.Min.Y), float64(b.Min.Y+b.Max.Y-1) / 2, float64(b.Max.Y - 1)}
	for _, y := range ys {
		for _, x := range xs {
			hm := far
			if hz.SignedDistance(x, y) > 0 {
				hm = road
			}
			if up != nil {
				for _, seg := range up.Segments {
					if x < float64(seg.Col0) || x >= float64(seg.Col1) || y < seg.TopRow {
						continue
					}
					// The base line's row at x, as SynthesizeScene and
					// MoverDetector interpolate it.
					base := seg.BaseRow0 + (seg.BaseRow1-seg.BaseRow0)*(x-float64(seg.Col0)+0.5)/float64(seg.Col1-seg.Col0)
					if y <= base {
						hm = PlaneHomography(c, m.DxM, m.DyM, m.DyawRad, seg.Plane)
						break
					}
				}
			}
			u, v, ok := hm.Apply(x, y)
			// A point mapped beyond ten picture sizes (near the horizon
			// of its plane) says nothing about the picture.
			lim := 10 * float64(max(c.Width, c.Height))
			if !ok || !(math.Abs(u) < lim && math.Abs(v) < lim) {
				continue
			}
			px, py := int(math.Floor(u)), int(math.Floor(v))
			out = out.Union(image.Rect(px, py, px+1, py+1))
		}
	}
	return out
}
