package simdrive

import (
	"fmt"
	"image"
	"image/color"
	"math"
	"math/rand/v2"

	"gocv.io/x/gocv"
)

// Street layout in metres (lateral offsets from the vehicle path, + left).
// The vehicle drives in the centre of the right lane of a two-lane road.
const (
	laneM          = 3.5
	roadRightM     = -laneM / 2  // right road edge
	roadLeftM      = 1.5 * laneM // left road edge
	centreLineM    = laneM / 2   // dashed centre line
	edgeLineWM     = 0.15        // solid edge line width
	centreLineWM   = 0.12        // dashed centre line width
	dashM, gapM    = 3.0, 6.0    // centre line dash pattern (common practice order of magnitude)
	kerbM          = 0.2         // kerb width
	sidewalkM      = 2.5         // sidewalk width beyond the kerb
	slabM          = 1.5         // sidewalk slab length
	postEveryM     = 15.0        // roadside post spacing
	postWM, postHM = 0.15, 1.1   // post size
	postInsetM     = 0.5         // post distance beyond the road edge
	mapMarginM     = 40.0        // ground beyond the street kept in the map
	facadePxPerM   = 20.0        // facade texture resolution
	maxSubQuadM    = 6.0         // facades are split into pieces at most this wide
	maxMapSide     = 12000       // largest ground map side in texels
	backStraightM  = 30.0        // straight road behind the start
)

// Ground labels.
const (
	lblGrass = iota
	lblAsphalt
	lblSidewalk
	lblPaint
	lblKerb
	lblJoint
	nLabels
)

// groundMap is the road plane rasterised in world coordinates: texel (u, v)
// has its centre at world x = x0 + u*texelM, y = y0 - v*texelM.
type groundMap struct {
	levels []gocv.Mat   // pyramid, levels[0] full resolution, 8UC3 BGR
	border []color.RGBA // mean colour per level, used beyond the map
	x0, y0 float64
	texelM float64
}

// mapCoord returns the level-0 texel coordinates of a world ground point.
func (g *groundMap) mapCoord(x, y float64) (u, v float64) {
	return (x - g.x0) / g.texelM, (g.y0 - y) / g.texelM
}

// quad is a textured vertical rectangle in the world: bottom-left corner
// p0, unit horizontal direction ua, width and height in metres. levels[L]
// is the texture at pyramid level L (views into a shared texture).
type quad struct {
	p0       vec3
	ua       vec3
	wM, hM   float64
	levels   []gocv.Mat
	texW0    float64   // level-0 texture width in texels
	texH0    float64   // level-0 texture height in texels
	offs     []float64 // per level: level-0 texel offset of the view's column 0 from the quad's left edge
	centre   vec3
	isMarker bool  // test hook: not used by the generator
	surf     int32 // the surface it belongs to (scene.surfaces); 0 for a road user
}

// scene holds everything rendered: ground map, quads and the sky image.
type scene struct {
	ground   groundMap
	quads    []quad
	textures []gocv.Mat // owned full textures and pyramid levels (quads hold views)
	sky      gocv.Mat
	posts    []vec3 // post base centres (world), for tests

	// Moving road users (Config.Traffic; none by default), placed per
	// frame by trafficAt along path.
	traffic      []roadUser
	path         []pathSample
	meanSpeedMps float64

	// surfaces are the static surfaces by id (see Geometry): the sky, the
	// ground, then one per post and one per facade (all its pieces).
	surfaces []surface
}

// Close releases the OpenCV memory.
func (s *scene) Close() {
	for _, m := range s.ground.levels {
		m.Close()
	}
	for _, q := range s.quads {
		for _, m := range q.levels {
			m.Close()
		}
	}
	for _, u := range s.traffic {
		for _, q := range u.faces {
			for _, m := range q.levels {
				m.Close()
			}
		}
	}
	for _, m := range s.textures {
		m.Close()
	}
	s.sky.Close()
}

// pathSample is a point of the vehicle path with its unit left normal.
type pathSample struct {
	p, n vec3 // position (z = 0), left normal
	t    vec3 // unit tangent
	s    float64
}

// samplePath returns path samples about every stepM metres from
// backStraightM behind the start to the end of the integrated trajectory.
func samplePath(tr *trajectory, stepM float64) []pathSample {
	var out []pathSample
	for s := -backStraightM; s < 0; s += stepM {
		out = append(out, pathSample{p: vec3{s, 0, 0}, n: vec3{0, 1, 0}, t: vec3{1, 0, 0}, s: s})
	}
	s, last := 0.0, vec3{}
	for k := 0; k < len(tr.grid); k++ {
		g := tr.grid[k]
		p := vec3{g.XM, g.YM, 0}
		if k > 0 {
			s += math.Hypot(p[0]-last[0], p[1]-last[1])
		}
		last = p
		if len(out) > 0 && s-out[len(out)-1].s < stepM && k != len(tr.grid)-1 {
			continue
		}
		c, sn := math.Cos(g.YawRad), math.Sin(g.YawRad)
		out = append(out, pathSample{p: p, n: vec3{-sn, c, 0}, t: vec3{c, sn, 0}, s: s})
	}
	return out
}

// buildScene rasterises the ground map and places posts and facades along
// the trajectory. Deterministic for seed.
func buildScene(tr *trajectory, texelM float64, width, height int, cam pinhole, seed int64, setbackM float64) (*scene, error) {
	rng := rand.New(rand.NewPCG(uint64(seed), 0x5ce7e))
	path := samplePath(tr, 0.5)
	sc := &scene{path: path, surfaces: []surface{SurfaceNone: {}, SurfaceSky: {class: ClassSky},
		SurfaceGround: {class: ClassGround, n: vec3{0, 0, 1}}, SurfaceRoadUser: {class: ClassRoadUser}}}
	if err := sc.buildGround(path, texelM, rng); err != nil {
		sc.Close()
		return nil, err
	}
	sc.placePosts(path)
	sc.placeFacades(path, setbackM, rng)
	sc.sky = makeSky(width, height, cam)
	return sc, nil
}

// buildGround rasterises labels with gocv.FillPoly, then colours each texel
// from its label and three octaves of seeded value noise.
func (sc *scene) buildGround(path []pathSample, texelM float64, rng *rand.Rand) error {
	minX, minY, maxX, maxY := math.Inf(1), math.Inf(1), math.Inf(-1), math.Inf(-1)
	for _, p := range path {
		minX, maxX = math.Min(minX, p.p[0]), math.Max(maxX, p.p[0])
		minY, maxY = math.Min(minY, p.p[1]), math.Max(maxY, p.p[1])
	}
	minX, minY, maxX, maxY = minX-mapMarginM, minY-mapMarginM, maxX+mapMarginM, maxY+mapMarginM
	for (maxX-minX)/texelM > maxMapSide || (maxY-minY)/texelM > maxMapSide {
		texelM *= 1.25 // keep memory bounded for long drives
	}
	w, h := int(math.Ceil((maxX-minX)/texelM))+1, int(math.Ceil((maxY-minY)/texelM))+1
	g := &sc.ground
	g.x0, g.y0, g.texelM = minX, maxY, texelM

	labels := gocv.NewMatWithSizeFromScalar(gocv.NewScalar(lblGrass, 0, 0, 0), h, w, gocv.MatTypeCV8UC1)
	defer labels.Close()
	toPx := func(p vec3) image.Point {
		u, v := g.mapCoord(p[0], p[1])
		return image.Pt(int(math.Round(u*16)), int(math.Round(v*16))) // 4 fractional bits
	}
	fill := func(polys [][]image.Point, label uint8) {
		pv := gocv.NewPointsVectorFromPoints(polys)
		defer pv.Close()
		gocv.FillPolyWithParams(&labels, pv, color.RGBA{B: label}, gocv.Line8, 4, image.Point{})
	}
	// strip returns one polygon covering lateral offsets [a, b] along the path.
	strip := func(a, b float64) []image.Point {
		pts := make([]image.Point, 0, 2*len(path))
		for _, p := range path {
			pts = append(pts, toPx(p.p.add(p.n.scale(a))))
		}
		for i := len(path) - 1; i >= 0; i-- {
			pts = append(pts, toPx(path[i].p.add(path[i].n.scale(b))))
		}
		return pts
	}
	sideL0, sideL1 := roadLeftM+kerbM, roadLeftM+kerbM+sidewalkM
	sideR0, sideR1 := roadRightM-kerbM, roadRightM-kerbM-sidewalkM
	fill([][]image.Point{strip(sideR1, sideR0), strip(sideL0, sideL1)}, lblSidewalk)
	fill([][]image.Point{strip(sideR0, roadRightM), strip(roadLeftM, sideL0)}, lblKerb)
	fill([][]image.Point{strip(roadRightM, roadLeftM)}, lblAsphalt)
	fill([][]image.Point{strip(roadRightM+0.1, roadRightM+0.1+edgeLineWM), strip(roadLeftM-0.1-edgeLineWM, roadLeftM-0.1)}, lblPaint)
	// Dashes of the centre line and joints across the sidewalks, by arc length.
	var dashes, joints [][]image.Point
	segment := func(s0, s1, a, b float64) []image.Point {
		i0, i1 := pathIndex(path, s0), pathIndex(path, s1)
		var pts []image.Point
		for i := i0; i <= i1; i++ {
			pts = append(pts, toPx(path[i].p.add(path[i].n.scale(a))))
		}
		for i := i1; i >= i0; i-- {
			pts = append(pts, toPx(path[i].p.add(path[i].n.scale(b))))
		}
		return pts
	}
	end := path[len(path)-1].s
	for s := path[0].s; s+dashM < end; s += dashM + gapM {
		dashes = append(dashes, segment(s, s+dashM, centreLineM-centreLineWM/2, centreLineM+centreLineWM/2))
	}
	for s := path[0].s; s < end; s += slabM {
		i := pathIndex(path, s)
		p := path[i]
		for _, ab := range [][2]float64{{sideR1, sideR0}, {sideL0, sideL1}} {
			half := p.t.scale(0.03)
			joints = append(joints, []image.Point{
				toPx(p.p.add(p.n.scale(ab[0])).sub(half)), toPx(p.p.add(p.n.scale(ab[0])).add(half)),
				toPx(p.p.add(p.n.scale(ab[1])).add(half)), toPx(p.p.add(p.n.scale(ab[1])).sub(half)),
			})
		}
	}
	for _, d := range dashes {
		fill([][]image.Point{d}, lblPaint)
	}
	for _, j := range joints {
		fill([][]image.Point{j}, lblJoint)
	}

	// Noise octaves: per-texel grain, ~0.4 m mottling, ~4 m patches.
	fine := randomMat(rng, h, w)
	defer fine.Close()
	mid := valueNoise(rng, h, w, 0.4/texelM)
	defer mid.Close()
	coarse := valueNoise(rng, h, w, 4/texelM)
	defer coarse.Close()

	img := gocv.NewMatWithSize(h, w, gocv.MatTypeCV8UC3)
	lb, _ := labels.DataPtrUint8()
	fb, _ := fine.DataPtrUint8()
	mb, _ := mid.DataPtrUint8()
	cb, _ := coarse.DataPtrUint8()
	out, err := img.DataPtrUint8()
	if err != nil {
		img.Close()
		return fmt.Errorf("simdrive: ground map: %w", err)
	}
	// Per label: BGR base colour and amplitudes of the three octaves.
	type look struct {
		bgr              [3]float64
		aFine, aMid, aCo float64
	}
	looks := [nLabels]look{
		lblGrass:    {[3]float64{45, 125, 70}, 0.30, 0.25, 0.30},
		lblAsphalt:  {[3]float64{88, 88, 92}, 0.35, 0.12, 0.15},
		lblSidewalk: {[3]float64{165, 170, 174}, 0.12, 0.10, 0.12},
		lblPaint:    {[3]float64{228, 232, 235}, 0.06, 0.04, 0.12},
		lblKerb:     {[3]float64{195, 198, 200}, 0.10, 0.05, 0.05},
		lblJoint:    {[3]float64{95, 98, 100}, 0.10, 0.05, 0.05},
	}
	for i, l := range lb {
		lk := looks[l%nLabels]
		f := (float64(fb[i]) - 127.5) / 127.5
		m := (float64(mb[i]) - 127.5) / 127.5
		c := (float64(cb[i]) - 127.5) / 127.5
		k := 1 + lk.aFine*f + lk.aMid*m + lk.aCo*c
		for ch := 0; ch < 3; ch++ {
			v := lk.bgr[ch] * k
			if l == lblGrass && ch == 2 { // dry patches: more red in the grass
				v += 25 * c
			}
			out[3*i+ch] = clamp8(v)
		}
	}
	g.levels = append(g.levels, img)
	for len(g.levels) < 6 {
		prev := g.levels[len(g.levels)-1]
		if prev.Cols() < 64 || prev.Rows() < 64 {
			break
		}
		next := gocv.NewMat()
		gocv.PyrDown(prev, &next, image.Point{}, gocv.BorderReflect101)
		g.levels = append(g.levels, next)
	}
	for _, m := range g.levels {
		mean := m.Mean()
		g.border = append(g.border, color.RGBA{B: clamp8(mean.Val1), G: clamp8(mean.Val2), R: clamp8(mean.Val3)})
	}
	return nil
}

// pathIndex returns the index of the last sample with arc length <= s.
func pathIndex(path []pathSample, s float64) int {
	lo, hi := 0, len(path)-1
	for lo < hi {
		mid := (lo + hi + 1) / 2
		if path[mid].s <= s {
			lo = mid
		} else {
			hi = mid - 1
		}
	}
	return lo
}

// placePosts stands a post every postEveryM metres on both sides, its face
// turned toward oncoming view (plane normal along the road).
func (sc *scene) placePosts(path []pathSample) {
	tex := gocv.NewMatWithSizeFromScalar(gocv.NewScalar(235, 238, 240, 0), 110, 16, gocv.MatTypeCV8UC3)
	gocv.Rectangle(&tex, image.Rect(0, 0, 16, 22), color.RGBA{B: 20, G: 20, R: 20}, -1)
	gocv.Rectangle(&tex, image.Rect(3, 6, 13, 16), color.RGBA{B: 0, G: 120, R: 255}, -1)
	gocv.Rectangle(&tex, image.Rect(0, 96, 16, 110), color.RGBA{B: 60, G: 60, R: 60}, -1)
	levels := pyramid(&tex)
	sc.textures = append(sc.textures, tex)
	sc.textures = append(sc.textures, levels[1:]...)
	end := path[len(path)-1].s
	for s := path[0].s + postEveryM/2; s < end; s += postEveryM {
		p := path[pathIndex(path, s)]
		for _, off := range []float64{roadRightM - postInsetM, roadLeftM + postInsetM} {
			base := p.p.add(p.n.scale(off))
			// The face spans across the road direction (along the normal).
			q := quad{p0: base.sub(p.n.scale(postWM / 2)), ua: p.n, wM: postWM, hM: postHM,
				texW0: 16, texH0: 110}
			q.surf = sc.addSurface(ClassPost, q.p0, q.ua)
			for _, l := range levels {
				q.levels = append(q.levels, l.Region(image.Rect(0, 0, l.Cols(), l.Rows())))
				q.offs = append(q.offs, 0)
			}
			q.centre = base.add(vec3{0, 0, postHM / 2})
			sc.quads = append(sc.quads, q)
			sc.posts = append(sc.posts, base)
		}
	}
}

// placeFacades lines both sides with building fronts of random length,
// height and setback (setbackM plus 0-6 m behind the sidewalk), separated by
// random gaps; each is split into pieces
// at most maxSubQuadM wide so that painter's order and texture level suit
// long facades.
func (sc *scene) placeFacades(path []pathSample, setbackM float64, rng *rand.Rand) {
	end := path[len(path)-1].s
	for side := 0; side < 2; side++ {
		s := path[0].s + rng.Float64()*5
		for {
			length := 8 + 14*rng.Float64()
			if s+length > end {
				break
			}
			height := 5 + 9*rng.Float64()
			setback := setbackM + 6*rng.Float64()
			var off float64
			if side == 0 {
				off = roadRightM - kerbM - sidewalkM - setback
			} else {
				off = roadLeftM + kerbM + sidewalkM + setback
			}
			a, b := path[pathIndex(path, s)], path[pathIndex(path, s+length)]
			pa, pb := a.p.add(a.n.scale(off)), b.p.add(b.n.scale(off))
			sc.addFacade(pa, pb, height, rng)
			s += length + 2 + 8*rng.Float64()
		}
	}
}

// addFacade makes a textured building front from pa to pb (ground points).
func (sc *scene) addFacade(pa, pb vec3, heightM float64, rng *rand.Rand) {
	d := pb.sub(pa)
	wM := math.Hypot(d[0], d[1])
	ua := d.scale(1 / wM)
	tex := facadeTexture(rng, int(math.Round(wM*facadePxPerM)), int(math.Round(heightM*facadePxPerM)))
	levels := pyramid(&tex)
	sc.textures = append(sc.textures, tex)
	sc.textures = append(sc.textures, levels[1:]...)
	texW0, texH0 := float64(tex.Cols()), float64(tex.Rows())
	n := int(math.Ceil(wM / maxSubQuadM))
	surf := sc.addSurface(ClassFacade, pa, ua)
	for i := 0; i < n; i++ {
		a0, a1 := int(math.Round(texW0*float64(i)/float64(n))), int(math.Round(texW0*float64(i+1)/float64(n)))
		q := quad{
			p0: pa.add(ua.scale(float64(a0) / texW0 * wM)), ua: ua,
			wM: float64(a1-a0) / texW0 * wM, hM: heightM,
			texW0: float64(a1 - a0), texH0: texH0, surf: surf,
		}
		for l, m := range levels {
			x0, x1 := a0>>l, (a1+(1<<l)-1)>>l
			if x1 > m.Cols() {
				x1 = m.Cols()
			}
			if x1 <= x0 {
				break
			}
			q.levels = append(q.levels, m.Region(image.Rect(x0, 0, x1, m.Rows())))
			q.offs = append(q.offs, float64(x0<<l-a0))
		}
		q.centre = q.p0.add(ua.scale(q.wM / 2)).add(vec3{0, 0, heightM / 2})
		sc.quads = append(sc.quads, q)
	}
}

// facadeTexture draws a wall with floors of windows, a ground-floor band
// with doors, and grain, deterministic for rng.
func facadeTexture(rng *rand.Rand, w, h int) gocv.Mat {
	walls := [][3]float64{{150, 180, 205}, {120, 130, 170}, {175, 175, 172}, {95, 110, 150}, {160, 150, 130}}
	base := walls[rng.IntN(len(walls))]
	tex := gocv.NewMatWithSizeFromScalar(gocv.NewScalar(base[0], base[1], base[2], 0), h, w, gocv.MatTypeCV8UC3)
	px := facadePxPerM
	// Ground floor band.
	gf := int(3.5 * px)
	gocv.Rectangle(&tex, image.Rect(0, h-gf, w, h), scale3(base, 0.75), -1)
	floorH := 3.0 * px
	winW, winH, pitch := 1.2*px, 1.5*px, 2.5*px
	for top := float64(h-gf) - floorH; top > 0.3*px; top -= floorH {
		gocv.Line(&tex, image.Pt(0, int(top+floorH-2)), image.Pt(w, int(top+floorH-2)), scale3(base, 0.6), 2)
		for x := 0.6 * px; x+winW < float64(w)-0.3*px; x += pitch {
			r := image.Rect(int(x), int(top+0.7*px), int(x+winW), int(top+0.7*px+winH))
			glass := 40 + 80*rng.Float64()
			lit := rng.Float64() < 0.2
			c := color.RGBA{B: uint8(glass + 40), G: uint8(glass + 10), R: uint8(glass), A: 0}
			if lit {
				c = color.RGBA{B: 120, G: 200, R: 230}
			}
			gocv.Rectangle(&tex, r, c, -1)
			gocv.Rectangle(&tex, r, color.RGBA{B: 235, G: 235, R: 235}, 2)
			gocv.Line(&tex, image.Pt(r.Min.X+r.Dx()/2, r.Min.Y), image.Pt(r.Min.X+r.Dx()/2, r.Max.Y), color.RGBA{B: 220, G: 220, R: 220}, 1)
		}
	}
	// Doors and shop windows on the ground floor.
	for x := 1.0 * px; x+2*px < float64(w); x += (3 + 4*rng.Float64()) * px {
		wd := (1 + 1.5*rng.Float64()) * px
		r := image.Rect(int(x), h-int(2.6*px), int(x+wd), h)
		gocv.Rectangle(&tex, r, color.RGBA{B: uint8(30 + rng.IntN(60)), G: uint8(30 + rng.IntN(40)), R: uint8(30 + rng.IntN(40))}, -1)
	}
	// Grain so that flat wall areas still carry texture.
	grain := randomMat(rng, h, w)
	defer grain.Close()
	gr, _ := grain.DataPtrUint8()
	tb, _ := tex.DataPtrUint8()
	for i := range gr {
		d := (float64(gr[i]) - 127.5) * 0.12
		for ch := 0; ch < 3; ch++ {
			tb[3*i+ch] = clamp8(float64(tb[3*i+ch]) + d)
		}
	}
	return tex
}

func scale3(c [3]float64, k float64) color.RGBA {
	return color.RGBA{B: clamp8(c[0] * k), G: clamp8(c[1] * k), R: clamp8(c[2] * k)}
}

// pyramid returns tex followed by PyrDown levels down to about 8 texels.
// The first element is tex itself (not a copy).
func pyramid(tex *gocv.Mat) []gocv.Mat {
	out := []gocv.Mat{*tex}
	for {
		prev := out[len(out)-1]
		if prev.Cols() < 16 || prev.Rows() < 16 || len(out) >= 6 {
			return out
		}
		next := gocv.NewMat()
		gocv.PyrDown(prev, &next, image.Point{}, gocv.BorderReflect101)
		out = append(out, next)
	}
}

// randomMat returns an h x w 8UC1 matrix of seeded uniform bytes.
func randomMat(rng *rand.Rand, h, w int) gocv.Mat {
	m := gocv.NewMatWithSize(h, w, gocv.MatTypeCV8UC1)
	b, _ := m.DataPtrUint8()
	for i := 0; i < len(b); i += 8 {
		v := rng.Uint64()
		for j := 0; j < 8 && i+j < len(b); j++ {
			b[i+j] = byte(v >> (8 * j))
		}
	}
	return m
}

// valueNoise returns smooth 8UC1 noise with features about cellTexels
// wide: a coarse seeded grid upsampled with bicubic interpolation.
func valueNoise(rng *rand.Rand, h, w int, cellTexels float64) gocv.Mat {
	gh, gw := int(float64(h)/cellTexels)+2, int(float64(w)/cellTexels)+2
	small := randomMat(rng, gh, gw)
	defer small.Close()
	out := gocv.NewMat()
	gocv.Resize(small, &out, image.Pt(w, h), 0, 0, gocv.InterpolationCubic)
	return out
}

func clamp8(v float64) uint8 {
	switch {
	case v <= 0:
		return 0
	case v >= 255:
		return 255
	}
	return uint8(v + 0.5)
}

// makeSky paints a vertical gradient, pale at the horizon row and deeper
// blue at the top, for a camera with constant mounting.
func makeSky(width, height int, cam pinhole) gocv.Mat {
	sky := gocv.NewMatWithSize(height, width, gocv.MatTypeCV8UC3)
	b, _ := sky.DataPtrUint8()
	hy, ok := cam.horizonY(cam.cx)
	if !ok || hy < 1 {
		hy = float64(height) / 2
	}
	for y := 0; y < height; y++ {
		k := math.Min(1, math.Max(0, 1-float64(y)/hy)) // 0 at horizon, 1 at top
		bgr := [3]float64{235 - 20*k, 215 - 60*k, 200 - 110*k}
		for x := 0; x < width; x++ {
			i := 3 * (y*width + x)
			b[i], b[i+1], b[i+2] = clamp8(bgr[0]), clamp8(bgr[1]), clamp8(bgr[2])
		}
	}
	return sky
}
