package simdrive

import (
	"image"
	"image/color"
	"math"
	"sort"

	"gocv.io/x/gocv"
)

// nearZM is the near clipping plane distance for quads, metres.
const nearZM = 0.05

// renderer draws frames of a scene. It owns its frame and scratch buffers;
// render overwrites them, so callers copy or encode the frame before the
// next call. Not safe for concurrent use.
type renderer struct {
	cam    pinhole
	w, h   int
	sc     *scene
	frame  gocv.Mat   // 8UC3, the rendered frame
	tmp    gocv.Mat   // 8UC3 scratch for quad warps
	mask   gocv.Mat   // 8UC1 scratch for quad masks
	hm     gocv.Mat   // 3x3 CV_64F homography scratch
	order  []drawItem // per-frame draw list, reused
	poly   []vec3     // clipped quad polygon, reused
	proj   [][2]float64
	pts    []image.Point
	bands  []band // ground rows per pyramid level, fixed for a mounting
	ground bool   // draw the ground (tests switch parts off)
	quads  bool   // draw posts and facades

	// With traffic: tS is the time of the frame render draws, users the
	// road users' faces placed for it, and movers (8UC1) receives 255
	// where a road user is visible and 0 elsewhere.
	tS     float64
	users  []*quad
	movers gocv.Mat
	zeros  gocv.Mat // 8UC1, all 0

	// geom, if not nil, receives the surface id of every pixel
	// (Scene.Render; see Geometry).
	geom []int32
}

// drawItem is a quad to draw and its distance from the camera: a scene
// quad, or a road user's face when quad >= len(scene.quads) (index into
// renderer.users after subtracting it).
type drawItem struct {
	quad int
	dist float64
}

// band is a range of image rows rendered from one ground pyramid level.
type band struct {
	y0, y1 int // rows [y0, y1)
	level  int
}

func newRenderer(cam pinhole, w, h int, sc *scene) *renderer {
	r := &renderer{
		cam: cam, w: w, h: h, sc: sc,
		frame:  gocv.NewMatWithSize(h, w, gocv.MatTypeCV8UC3),
		tmp:    gocv.NewMatWithSize(h, w, gocv.MatTypeCV8UC3),
		mask:   gocv.NewMatWithSize(h, w, gocv.MatTypeCV8UC1),
		hm:     gocv.NewMatWithSize(3, 3, gocv.MatTypeCV64F),
		ground: true, quads: true,
	}
	r.bands = r.groundBands()
	if len(sc.traffic) > 0 {
		r.movers = gocv.NewMatWithSize(h, w, gocv.MatTypeCV8UC1)
		r.zeros = gocv.Zeros(h, w, gocv.MatTypeCV8UC1)
	}
	return r
}

// Close releases the buffers (not the scene).
func (r *renderer) Close() {
	r.frame.Close()
	r.tmp.Close()
	r.mask.Close()
	r.hm.Close()
	if r.movers.Ptr() != nil {
		r.movers.Close()
		r.zeros.Close()
	}
}

// horizon returns the row span of the horizon line across the image:
// rows [0, skyEnd) lie entirely above it, rows [skyEnd, groundEnd) straddle
// it and rows from groundEnd on lie entirely below it (clamped to [0, h]).
// The ground is drawn from skyEnd down and the sky painted over the part of
// the straddling rows above the line.
func (r *renderer) horizon() (skyEnd, groundEnd int) {
	yl, okl := r.cam.horizonY(0)
	yr, okr := r.cam.horizonY(float64(r.w - 1))
	if !okl || !okr {
		return 0, 0
	}
	skyEnd = min(max(int(math.Floor(math.Min(yl, yr)))+1, 0), r.h)
	groundEnd = min(max(int(math.Floor(math.Max(yl, yr)))+1, 0), r.h)
	return skyEnd, groundEnd
}

// groundBands splits the rows below the horizon by distance so that each
// band samples the ground pyramid level whose texel roughly matches the
// pixel footprint: the geometric mean of the lateral (D/f) and
// longitudinal (D²/(h f)) footprints of a pixel at ground distance D, i.e.
// D^1.5 / (f sqrt(h)). Roll is ignored for the split (bands stay valid,
// only the level choice is approximate).
func (r *renderer) groundBands() []band {
	top, _ := r.horizon()
	g := &r.sc.ground
	hM := r.cam.centreV[2]
	pitch := math.Asin(-r.cam.rVC[1][2]) // optical axis downward angle from the rotation
	f := r.cam.fy
	var bands []band
	y1 := r.h
	for lvl := 1; lvl <= len(g.levels); lvl++ {
		y0 := top
		if lvl < len(g.levels) {
			texel := g.texelM * float64(int(1)<<lvl)
			d := math.Pow(texel*f*math.Sqrt(hM), 2.0/3)
			y := r.cam.cy + f*math.Tan(math.Atan(hM/d)-pitch)
			y0 = min(max(int(math.Ceil(y)), top), y1)
		}
		if y0 < y1 {
			bands = append(bands, band{y0: y0, y1: y1, level: lvl - 1})
		}
		y1 = y0
	}
	return bands
}

// render draws the view from pose p into r.frame.
func (r *renderer) render(p pose) {
	rot, t := r.cam.extrinsics(p)
	if r.ground {
		r.renderGround(p, rot, t)
	} else {
		r.frame.SetTo(gocv.NewScalar(0, 0, 0, 0))
	}
	r.renderSky()
	if r.geom != nil {
		r.writeGroundAndSky()
	}
	if r.movers.Ptr() != nil {
		r.movers.SetTo(gocv.NewScalar(0, 0, 0, 0))
	}
	if r.quads {
		r.renderQuads(rot, t)
	}
}

// renderGround warps the ground map into the rows below the horizon. The
// homography is found from four ground points ahead of the vehicle: their
// map texel coordinates and their pixels under our projection, passed to
// gocv.GetPerspectiveTransform2f. Each band then uses H·diag(2^L, 2^L, 1)
// for its pyramid level and a row shift for its ROI.
func (r *renderer) renderGround(p pose, rot mat3, t vec3) {
	g := &r.sc.ground
	c, s := math.Cos(p.YawRad), math.Sin(p.YawRad)
	ahead := r.cam.centreV[0]
	var src, dst []gocv.Point2f
	for _, v := range [4][2]float64{{ahead + 4, 4}, {ahead + 4, -4}, {ahead + 40, -4}, {ahead + 40, 4}} {
		wx, wy := p.XM+c*v[0]-s*v[1], p.YM+s*v[0]+c*v[1]
		u, vv := g.mapCoord(wx, wy)
		px, py := r.cam.projectCam(toCamera(rot, t, vec3{wx, wy, 0}))
		src = append(src, gocv.Point2f{X: float32(u), Y: float32(vv)})
		dst = append(dst, gocv.Point2f{X: float32(px), Y: float32(py)})
	}
	sv := gocv.NewPoint2fVectorFromPoints(src)
	dv := gocv.NewPoint2fVectorFromPoints(dst)
	hMat := gocv.GetPerspectiveTransform2f(sv, dv)
	sv.Close()
	dv.Close()
	var h0 [3][3]float64
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			h0[i][j] = hMat.GetDoubleAt(i, j)
		}
	}
	hMat.Close()
	for _, b := range r.bands {
		k := float64(int(1) << b.level)
		for i := 0; i < 3; i++ {
			shift := 0.0
			if i == 1 {
				shift = float64(b.y0)
			}
			// Row shift: y' = y - y0, i.e. row1 -= y0*row2.
			r.hm.SetDoubleAt(i, 0, (h0[i][0]-shift*h0[2][0])*k)
			r.hm.SetDoubleAt(i, 1, (h0[i][1]-shift*h0[2][1])*k)
			r.hm.SetDoubleAt(i, 2, h0[i][2]-shift*h0[2][2])
		}
		roi := r.frame.Region(image.Rect(0, b.y0, r.w, b.y1))
		gocv.WarpPerspectiveWithParams(g.levels[b.level], &roi, r.hm, image.Pt(r.w, b.y1-b.y0),
			gocv.InterpolationLinear, gocv.BorderConstant, g.border[b.level])
		roi.Close()
	}
}

// renderSky copies the sky image over every pixel above the horizon,
// replacing whatever the ground warp produced there.
func (r *renderer) renderSky() {
	skyEnd, groundEnd := r.horizon()
	if skyEnd > 0 {
		src := r.sc.sky.Region(image.Rect(0, 0, r.w, skyEnd))
		dst := r.frame.Region(image.Rect(0, 0, r.w, skyEnd))
		src.CopyTo(&dst)
		src.Close()
		dst.Close()
	}
	if groundEnd <= skyEnd {
		return
	}
	// Slanted horizon (roll): mask the part above the line in the
	// straddling rows.
	yl, _ := r.cam.horizonY(0)
	yr, _ := r.cam.horizonY(float64(r.w - 1))
	rect := image.Rect(0, skyEnd, r.w, groundEnd)
	m := r.mask.Region(rect)
	m.SetTo(gocv.NewScalar(0, 0, 0, 0))
	oy := float64(skyEnd)
	poly := [][]image.Point{{
		image.Pt(0, int(math.Round((yl-oy)*16))),
		image.Pt((r.w-1)*16, int(math.Round((yr-oy)*16))),
		image.Pt((r.w-1)*16, -16), image.Pt(0, -16),
	}}
	pv := gocv.NewPointsVectorFromPoints(poly)
	gocv.FillPolyWithParams(&m, pv, color.RGBA{B: 255}, gocv.Line8, 4, image.Point{})
	pv.Close()
	src := r.sc.sky.Region(rect)
	dst := r.frame.Region(rect)
	src.CopyToWithMask(&dst, m)
	src.Close()
	dst.Close()
	m.Close()
}

// renderQuads draws posts and facades far to near. Each quad is clipped to
// the near plane in 3-D, its polygon projected, and its texture warped into
// the polygon's bounding box only, with a fillPoly mask.
func (r *renderer) renderQuads(rot mat3, t vec3) {
	qs := r.sc.quads
	r.order = r.order[:0]
	for i := range qs {
		c := toCamera(rot, t, qs[i].centre)
		d := math.Sqrt(c.dot(c))
		if d > 250 || c[2] < -math.Max(qs[i].wM, qs[i].hM) {
			continue
		}
		r.order = append(r.order, drawItem{i, d})
	}
	if len(r.sc.traffic) > 0 {
		r.users = r.sc.trafficAt(r.users, r.tS)
		for i, q := range r.users {
			c := toCamera(rot, t, q.centre)
			if d := math.Sqrt(c.dot(c)); d <= 250 && c[2] >= -math.Max(q.wM, q.hM) {
				r.order = append(r.order, drawItem{len(qs) + i, d})
			}
		}
	}
	sort.Slice(r.order, func(a, b int) bool { return r.order[a].dist > r.order[b].dist })
	for _, it := range r.order {
		if it.quad >= len(qs) {
			r.drawQuad(r.users[it.quad-len(qs)], rot, t, true)
			continue
		}
		r.drawQuad(&qs[it.quad], rot, t, false)
	}
}

// drawQuad renders one quad (see renderQuads); with traffic, it also
// writes the quad's pixels into the movers mask, 255 for a road user's face
// and 0 for a static quad in front of one.
func (r *renderer) drawQuad(q *quad, rot mat3, t vec3, user bool) {
	up := vec3{0, 0, 1}
	tl := q.p0.add(up.scale(q.hM))
	corners := [4]vec3{tl, tl.add(q.ua.scale(q.wM)), q.p0.add(q.ua.scale(q.wM)), q.p0}
	var cc [4]vec3
	inFront := 0
	for k, w := range corners {
		cc[k] = toCamera(rot, t, w)
		if cc[k][2] >= nearZM {
			inFront++
		}
	}
	if inFront == 0 {
		return
	}
	r.poly = clipNear(r.poly[:0], cc[:], nearZM)
	poly := r.poly
	if len(poly) < 3 {
		return
	}
	minX, minY, maxX, maxY := math.Inf(1), math.Inf(1), math.Inf(-1), math.Inf(-1)
	r.pts = r.pts[:0]
	r.proj = r.proj[:0]
	for _, pc := range poly {
		u, v := r.cam.projectCam(pc)
		r.proj = append(r.proj, [2]float64{u, v})
		r.pts = append(r.pts, image.Point{})
		minX, maxX = math.Min(minX, u), math.Max(maxX, u)
		minY, maxY = math.Min(minY, v), math.Max(maxY, v)
	}
	rect := image.Rect(int(math.Floor(minX)), int(math.Floor(minY)), int(math.Ceil(maxX))+1, int(math.Ceil(maxY))+1).
		Intersect(image.Rect(0, 0, r.w, r.h))
	if rect.Empty() {
		return
	}
	proj, pts := r.proj, r.pts
	for k, pr := range proj {
		pts[k] = image.Pt(int(math.Round((pr[0]-float64(rect.Min.X))*16)), int(math.Round((pr[1]-float64(rect.Min.Y))*16)))
	}
	// Texture level: texels of the whole quad per covered pixel, when all
	// corners are in front; otherwise the quad is near and level 0 is right.
	level := 0
	if inFront == 4 {
		var area float64
		for k := 0; k < 4; k++ {
			a, b := proj[k], proj[(k+1)%4]
			area += a[0]*b[1] - b[0]*a[1]
		}
		area = math.Abs(area) / 2
		if area > 0 {
			ratio := math.Sqrt(q.texW0 * q.texH0 / area)
			level = int(math.Floor(math.Log2(math.Max(ratio, 1))))
		}
	}
	level = min(level, len(q.levels)-1)
	// Homography texture(level) -> ROI pixels:
	// P(a, b) = TL + (a*2^L + off) sx ua - b*2^L sy z, pixel ~ K (R P + t).
	k := float64(int(1) << level)
	sx, sy := q.wM/q.texW0, q.hM/q.texH0
	ra := rot.mulVec(q.ua)
	rz := rot.mulVec(up)
	c0 := toCamera(rot, t, tl.add(q.ua.scale(q.offs[level]*sx)))
	colA := ra.scale(sx * k)
	colB := rz.scale(-sy * k)
	km := r.cam.kMat()
	cols := [3]vec3{km.mulVec(colA), km.mulVec(colB), km.mulVec(c0)}
	for j := 0; j < 3; j++ {
		r.hm.SetDoubleAt(0, j, cols[j][0]-float64(rect.Min.X)*cols[j][2])
		r.hm.SetDoubleAt(1, j, cols[j][1]-float64(rect.Min.Y)*cols[j][2])
		r.hm.SetDoubleAt(2, j, cols[j][2])
	}
	tmp := r.tmp.Region(rect)
	gocv.WarpPerspectiveWithParams(q.levels[level], &tmp, r.hm, rect.Size(), gocv.InterpolationLinear, gocv.BorderReplicate, color.RGBA{})
	m := r.mask.Region(rect)
	m.SetTo(gocv.NewScalar(0, 0, 0, 0))
	pv := gocv.NewPointsVectorFromPoints([][]image.Point{pts})
	gocv.FillPolyWithParams(&m, pv, color.RGBA{B: 255}, gocv.Line8, 4, image.Point{})
	pv.Close()
	if r.geom != nil {
		surf := q.surf
		if user {
			surf = SurfaceRoadUser
		}
		r.writeQuadGeometry([4]int{rect.Min.X, rect.Min.Y, rect.Max.X, rect.Max.Y}, surf)
	}
	dst := r.frame.Region(rect)
	tmp.CopyToWithMask(&dst, m)
	dst.Close()
	if r.movers.Ptr() != nil {
		mv := r.movers.Region(rect)
		if user { // m is 255 inside the polygon
			m.CopyToWithMask(&mv, m)
		} else {
			z := r.zeros.Region(rect)
			z.CopyToWithMask(&mv, m)
			z.Close()
		}
		mv.Close()
	}
	m.Close()
	tmp.Close()
}

// clipNear appends to out the convex polygon poly (camera coordinates)
// clipped to z >= zn (Sutherland-Hodgman against one plane).
func clipNear(out, poly []vec3, zn float64) []vec3 {
	for i := range poly {
		a, b := poly[i], poly[(i+1)%len(poly)]
		ina, inb := a[2] >= zn, b[2] >= zn
		if ina {
			out = append(out, a)
		}
		if ina != inb {
			s := (zn - a[2]) / (b[2] - a[2])
			out = append(out, a.add(b.sub(a).scale(s)))
		}
	}
	return out
}
