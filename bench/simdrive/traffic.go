package simdrive

import (
	"fmt"
	"image"
	"image/color"
	"math"
	"math/rand/v2"
	"path/filepath"

	"gocv.io/x/gocv"
)

// Moving road users (Config.Traffic). Sizes and speeds are round figures of
// our own choosing for a plausible street, not measured values.
const (
	// MoverMaskDir is the directory of a recording, beside frames/, that
	// holds one mask per frame when the drive has traffic: MoverMaskDir/
	// NNNNNN.png (the frame index, six digits), 8-bit grey, 255 where a
	// moving road user is visible in that frame and 0 elsewhere, exact to
	// the rendered pixel (before JPEG).
	MoverMaskDir = "movers"

	carWM, carLM, carHM = 1.8, 4.4, 1.4 // car width, length, height
	pedWM, pedHM        = 0.5, 1.7      // pedestrian board width, height
	pedWalkMps          = 1.4           // walking along the sidewalk
	pedRunMps           = 3.0           // crossing the road at a jog
)

// MoverMaskPath returns the mask file of frame i in recording dir.
func MoverMaskPath(dir string, i int) string {
	return filepath.Join(dir, MoverMaskDir, fmt.Sprintf("%06d.png", i))
}

// roadUser is one moving thing: a set of upright faces that travel along
// the road (arc position sM0 + vSMps·t, metres along the path) at a lateral
// offset latM0 + vLatMps·t (metres, + left of the vehicle path), while the
// time t is in [t0S, t1S].
type roadUser struct {
	sM0, vSMps     float64
	latM0, vLatMps float64
	t0S, t1S       float64
	car            bool // a box (front and side faces), else a board
	// aheadM > 0 marks the car ahead in our lane: it is aheadM + 3 m/s · t
	// ahead of the vehicle's own arc (sM0 and vSMps are unused).
	aheadM float64
	faces  []quad
}

// egoArcM is the vehicle's arc position at time tS: the integral of the
// scripted speed v(t) = mean · (1 + swing · sin(2π t / period)).
func egoArcM(meanSpeedMps, tS float64) float64 {
	return meanSpeedMps * (tS + speedSwing*speedPeriodS/(2*math.Pi)*(1-math.Cos(2*math.Pi*tS/speedPeriodS)))
}

// placeTraffic adds the road users of a drive of durationS seconds along
// path, deterministic for seed (its own random stream, so the static scene
// is the same as without traffic):
//
//   - oncoming cars in the left lane at 6-10 m/s, one passing the camera
//     about every 3 s;
//   - a car ahead in our lane, 12 m ahead at the start, pulling away at
//     3 m/s faster than the vehicle;
//   - pedestrians walking along both sidewalks at 1.4 m/s, either way;
//   - pedestrians jogging across the road at 3 m/s, timed to be off the
//     road before the vehicle comes within 15 m.
func (sc *scene) placeTraffic(tr *trajectory, durationS float64, seed int64) {
	sc.meanSpeedMps = tr.meanSpeedMps
	rng := rand.New(rand.NewPCG(uint64(seed), 0x7aff1c))
	egoArc := func(t float64) float64 { return egoArcM(tr.meanSpeedMps, t) }
	colours := [][3]float64{{40, 40, 180}, {170, 90, 30}, {30, 30, 30}, {200, 200, 205}, {40, 140, 200}, {60, 120, 60}}
	carTex := func() []gocv.Mat {
		c := colours[rng.IntN(len(colours))]
		tex := gocv.NewMatWithSizeFromScalar(gocv.NewScalar(c[0], c[1], c[2], 0), 56, 88, gocv.MatTypeCV8UC3)
		gocv.Rectangle(&tex, image.Rect(8, 6, 80, 24), color.RGBA{R: 50, G: 60, B: 70}, -1)  // windows
		gocv.Rectangle(&tex, image.Rect(0, 44, 88, 56), color.RGBA{R: 20, G: 20, B: 20}, -1) // wheels and sill
		gocv.Rectangle(&tex, image.Rect(4, 30, 16, 38), color.RGBA{R: 250, G: 240, B: 200}, -1)
		gocv.Rectangle(&tex, image.Rect(72, 30, 84, 38), color.RGBA{R: 250, G: 240, B: 200}, -1)
		levels := pyramid(&tex)
		sc.textures = append(sc.textures, tex)
		sc.textures = append(sc.textures, levels[1:]...)
		return levels
	}
	pedTex := func() []gocv.Mat {
		c := colours[rng.IntN(len(colours))]
		tex := gocv.NewMatWithSizeFromScalar(gocv.NewScalar(c[0], c[1], c[2], 0), 68, 20, gocv.MatTypeCV8UC3)
		gocv.Rectangle(&tex, image.Rect(5, 0, 15, 10), color.RGBA{R: 210, G: 160, B: 130}, -1) // head
		gocv.Rectangle(&tex, image.Rect(0, 38, 20, 68), color.RGBA{R: 35, G: 35, B: 60}, -1)   // legs
		levels := pyramid(&tex)
		sc.textures = append(sc.textures, tex)
		sc.textures = append(sc.textures, levels[1:]...)
		return levels
	}
	face := func(levels []gocv.Mat, wM, hM float64) quad {
		q := quad{wM: wM, hM: hM, texW0: float64(levels[0].Cols()), texH0: float64(levels[0].Rows())}
		for _, l := range levels {
			q.levels = append(q.levels, l.Region(image.Rect(0, 0, l.Cols(), l.Rows())))
			q.offs = append(q.offs, 0)
		}
		return q
	}
	end := durationS + 2
	for t := 1 + 1.5*rng.Float64(); t < end; t += 2.5 + rng.Float64() {
		v := 6 + 4*rng.Float64()
		tex := carTex()
		sc.traffic = append(sc.traffic, roadUser{sM0: egoArc(t) + v*t, vSMps: -v, latM0: laneM, t0S: -1, t1S: math.Inf(1), car: true,
			faces: []quad{face(tex, carWM, carHM), face(tex, carLM, carHM)}})
	}
	{
		sc.traffic = append(sc.traffic, roadUser{aheadM: 12, t0S: -1, t1S: math.Inf(1), car: true,
			faces: []quad{face(carTex(), carWM, carHM)}})
	}
	walkLat := []float64{roadRightM - kerbM - 1.2, roadLeftM + kerbM + 1.2}
	for k := 0; k < 10; k++ {
		dir := 1.0
		if rng.IntN(2) == 0 {
			dir = -1
		}
		tm := durationS * (float64(k) + rng.Float64()) / 10 // meets the camera about then
		s := egoArc(tm) + 1.5
		sc.traffic = append(sc.traffic, roadUser{sM0: s - dir*pedWalkMps*tm, vSMps: dir * pedWalkMps, latM0: walkLat[k%2],
			t0S: -1, t1S: math.Inf(1), faces: []quad{face(pedTex(), pedWM, pedHM)}})
	}
	from, to := roadRightM-kerbM-0.5, roadLeftM+kerbM+0.5
	crossS := (to - from) / pedRunMps
	for t0 := 0.5 + rng.Float64(); t0+crossS < durationS; t0 += 3 + 2*rng.Float64() {
		dir := 1.0
		lat0 := from
		if rng.IntN(2) == 0 {
			dir, lat0 = -1, to
		}
		s := egoArc(t0+crossS) + 15 + tr.meanSpeedMps*rng.Float64()
		sc.traffic = append(sc.traffic, roadUser{sM0: s, latM0: lat0, vLatMps: dir * pedRunMps, t0S: t0, t1S: t0 + crossS,
			faces: []quad{face(pedTex(), pedWM, pedHM)}})
	}
}

// trafficAt places the faces of every road user present at time tS and
// returns them in out[:0].
func (sc *scene) trafficAt(out []*quad, tS float64) []*quad {
	out = out[:0]
	up := vec3{0, 0, 1}
	for i := range sc.traffic {
		u := &sc.traffic[i]
		if tS < u.t0S || tS > u.t1S {
			continue
		}
		s := u.sM0 + u.vSMps*tS
		if u.aheadM > 0 {
			s = egoArcM(sc.meanSpeedMps, tS) + u.aheadM + 3*tS
		}
		lat := u.latM0
		if !math.IsInf(u.t1S, 0) {
			lat += u.vLatMps * (tS - u.t0S)
		}
		p, t, n := pathAt(sc.path, s)
		c := p.add(n.scale(lat))
		if u.car {
			// Front (or back) face across the road at the end toward the
			// camera, and the side toward our lane along the road.
			half := carLM / 2
			near := c.sub(t.scale(half))
			f := &u.faces[0]
			f.p0, f.ua = near.sub(n.scale(carWM/2)), n
			f.centre = near.add(up.scale(carHM / 2))
			out = append(out, f)
			if len(u.faces) > 1 {
				sd := &u.faces[1]
				sd.p0, sd.ua = near.sub(n.scale(carWM/2)), t
				sd.centre = c.sub(n.scale(carWM / 2)).add(up.scale(carHM / 2))
				out = append(out, sd)
			}
			continue
		}
		f := &u.faces[0]
		f.p0, f.ua = c.sub(n.scale(pedWM/2)), n
		f.centre = c.add(up.scale(pedHM / 2))
		out = append(out, f)
	}
	return out
}

// pathAt returns the point, unit tangent and unit left normal of the path
// at arc s, interpolated linearly between samples (clamped to the ends).
func pathAt(path []pathSample, s float64) (p, t, n vec3) {
	i := pathIndex(path, s)
	if i >= len(path)-1 {
		a := path[len(path)-1]
		return a.p, a.t, a.n
	}
	a, b := path[i], path[i+1]
	f := 0.0
	if b.s > a.s {
		f = math.Min(math.Max((s-a.s)/(b.s-a.s), 0), 1)
	}
	p = a.p.add(b.p.sub(a.p).scale(f))
	t = a.t.add(b.t.sub(a.t).scale(f))
	t = t.scale(1 / math.Sqrt(t.dot(t)))
	return p, t, vec3{-t[1], t[0], 0}
}
