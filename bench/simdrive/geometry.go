package simdrive

import (
	"fmt"
	"math"

	"gocv.io/x/gocv"
)

// Class is the kind of surface a pixel of a rendered frame shows.
type Class uint8

// Classes. The zero value is invalid (a pixel nothing was drawn on).
const (
	ClassNone     Class = iota
	ClassSky            // above the horizon, behind everything
	ClassGround         // the ground plane: road, kerbs, sidewalks, grass
	ClassPost           // a roadside post
	ClassFacade         // a building front
	ClassRoadUser       // a moving road user (Config.Traffic)
)

var classNames = [...]string{"none", "sky", "ground", "post", "facade", "road user"}

// String returns the class's name.
func (c Class) String() string {
	if int(c) < len(classNames) {
		return classNames[c]
	}
	return fmt.Sprintf("Class(%d)", uint8(c))
}

// Surface ids of Geometry.Surface. The static surfaces of the scene (one
// per post and one per facade, all its pieces) follow from
// firstQuadSurface on.
const (
	SurfaceNone     int32 = iota // nothing drawn
	SurfaceSky                   // the sky, at infinity
	SurfaceGround                // the ground plane z = 0
	SurfaceRoadUser              // every road user: they move, so no point of theirs is known from another frame
	firstQuadSurface
)

// surface is a static surface of the scene: its class and, for a plane,
// its unit normal n and offset off (world points X with n·X = off).
type surface struct {
	class Class
	n     vec3
	off   float64
}

// addSurface appends the vertical plane through p0 along the horizontal
// unit direction ua and returns its id.
func (sc *scene) addSurface(c Class, p0, ua vec3) int32 {
	n := vec3{ua[1], -ua[0], 0}
	n = n.scale(1 / math.Hypot(n[0], n[1]))
	sc.surfaces = append(sc.surfaces, surface{class: c, n: n, off: n.dot(p0)})
	return int32(len(sc.surfaces) - 1)
}

// Geometry is what each pixel of one rendered frame shows: the id of the
// surface it was drawn from (row-major, Width*Height; SurfaceSky,
// SurfaceGround, SurfaceRoadUser or a post's or facade's own id), and the
// pose the frame was rendered from. The zero value is an empty
// destination that Scene.Render sizes.
type Geometry struct {
	Width, Height int
	Surface       []int32
	pose          pose
}

// Visibility says whether the scene point a pixel of one frame shows is
// seen in another frame (Scene.Seen). The zero value is invalid.
type Visibility uint8

// Visibilities.
const (
	VisibilityNone Visibility = iota
	// Seen: the point projects into the other frame onto the same surface.
	Seen
	// Outside: it projects outside the other frame or behind its camera
	// (the point enters the view).
	Outside
	// Hidden: it projects into the other frame, where another surface hides
	// it (disoccluded).
	Hidden
	// Moving: a road user's point; the other frame shows it elsewhere.
	Moving
)

var visibilityNames = [...]string{"none", "seen", "outside", "hidden", "moving"}

// String returns the visibility's name.
func (v Visibility) String() string {
	if int(v) < len(visibilityNames) {
		return visibilityNames[v]
	}
	return fmt.Sprintf("Visibility(%d)", uint8(v))
}

// Scene renders the frames of a drive again, with the geometry of every
// pixel: the raw frames (before JPEG) and what each pixel shows, from the
// same scene and trajectory as Generate. It owns OpenCV memory (Close) and
// is not safe for concurrent use.
type Scene struct {
	cfg Config
	tr  *trajectory
	sc  *scene
	rd  *renderer
}

// NewScene builds the scene of the drive cfg describes (the same as
// Generate's for the same cfg).
func NewScene(cfg Config) (*Scene, error) {
	cfg, err := cfg.withDefaults()
	if err != nil {
		return nil, err
	}
	tr := newDriveTrajectory(cfg)
	ph := newPinhole(cfg.camera())
	sc, err := buildScene(tr, cfg.GroundTexelM, cfg.Width, cfg.Height, ph, cfg.Seed, cfg.FacadeSetbackM)
	if err != nil {
		return nil, err
	}
	if cfg.Traffic {
		sc.placeTraffic(tr, cfg.DurationS, cfg.Seed)
	}
	return &Scene{cfg: cfg, tr: tr, sc: sc, rd: newRenderer(ph, cfg.Width, cfg.Height, sc)}, nil
}

// Close releases the scene's memory. The Scene must not be used after.
func (s *Scene) Close() error {
	s.rd.Close()
	s.sc.Close()
	return nil
}

// Frames returns the number of frames of the drive.
func (s *Scene) Frames() int { return s.cfg.frameCount() }

// Class returns the class of a surface id of Geometry.Surface
// (ClassNone for an unknown id).
func (s *Scene) Class(surface int32) Class {
	if surface < 0 || int(surface) >= len(s.sc.surfaces) {
		return ClassNone
	}
	return s.sc.surfaces[surface].class
}

// Render draws frame i as Generate did before encoding it into frame
// (8UC3, (re)allocated if its size or type differ; owned by the caller) and,
// if g is not nil, writes what each pixel shows into g (its slice reused
// when large enough).
func (s *Scene) Render(i int, frame *gocv.Mat, g *Geometry) error {
	if i < 0 || i >= s.cfg.frameCount() {
		return fmt.Errorf("simdrive: frame %d of a drive of %d frames: %w", i, s.cfg.frameCount(), ErrConfig)
	}
	us := s.cfg.captureUs(i)
	p := s.tr.PoseAt(us)
	s.rd.tS = float64(us) * 1e-6
	if g != nil {
		n := s.cfg.Width * s.cfg.Height
		if cap(g.Surface) < n {
			g.Surface = make([]int32, n)
		}
		g.Width, g.Height, g.Surface, g.pose = s.cfg.Width, s.cfg.Height, g.Surface[:n], p
		s.rd.geom = g.Surface
	}
	s.rd.render(p)
	s.rd.geom = nil
	if frame.Rows() != s.cfg.Height || frame.Cols() != s.cfg.Width || frame.Type() != gocv.MatTypeCV8UC3 {
		frame.Close()
		*frame = gocv.NewMatWithSize(s.cfg.Height, s.cfg.Width, gocv.MatTypeCV8UC3)
	}
	s.rd.frame.CopyTo(frame)
	return nil
}

// Seen writes into dst (len Width*Height of target) whether the scene point
// each pixel of target shows is seen in source: the pixel centre is
// followed along its ray to its surface (exact: the ground plane, a post's
// or facade's plane, or a direction for the sky), projected into source's
// camera, and compared with the surface source shows at the nearest pixel.
// If xy is not nil (len 2*Width*Height), it receives where each pixel's
// point projects in source (x, y in pixels; meaningful where dst is Seen or
// Hidden).
func (s *Scene) Seen(dst []Visibility, xy []float32, target, source *Geometry) error {
	w, h := s.cfg.Width, s.cfg.Height
	if target.Width != w || target.Height != h || source.Width != w || source.Height != h || len(dst) != w*h ||
		(xy != nil && len(xy) != 2*w*h) {
		return fmt.Errorf("simdrive: geometry %dx%d and %dx%d, %d visibilities, %d coordinates, want %dx%d: %w",
			target.Width, target.Height, source.Width, source.Height, len(dst), len(xy), w, h, ErrConfig)
	}
	f := s.newFollower(target, source)
	for v := 0; v < h; v++ {
		for u := 0; u < w; u++ {
			i := v*w + u
			x, y, vis := f.follow(u, v)
			dst[i] = vis
			if xy != nil {
				xy[2*i], xy[2*i+1] = float32(x), float32(y)
			}
		}
	}
	return nil
}

// follower follows pixels of one frame into another (Scene.Seen).
type follower struct {
	s              *Scene
	target, source *Geometry
	rtT, rs        mat3
	ts, centre     vec3
}

func (s *Scene) newFollower(target, source *Geometry) follower {
	rt, tt := s.rd.cam.extrinsics(target.pose)
	rs, ts := s.rd.cam.extrinsics(source.pose)
	rtT := rt.transpose()
	return follower{s: s, target: target, source: source, rtT: rtT, rs: rs, ts: ts, centre: rtT.mulVec(tt).scale(-1)}
}

// follow returns where the scene point of target's pixel (u, v) projects in
// source (pixel coordinates, valid unless Outside, Moving or
// VisibilityNone) and whether source sees it there.
func (f follower) follow(u, v int) (x, y float64, vis Visibility) {
	cam, w, h := f.s.rd.cam, f.target.Width, f.target.Height
	id := f.target.Surface[v*w+u]
	switch {
	case id == SurfaceRoadUser:
		return 0, 0, Moving
	case id == SurfaceNone || int(id) >= len(f.s.sc.surfaces):
		return 0, 0, VisibilityNone
	}
	dir := f.rtT.mulVec(vec3{(float64(u) - cam.cx) / cam.fx, (float64(v) - cam.cy) / cam.fy, 1})
	var pc vec3
	if id == SurfaceSky {
		pc = f.rs.mulVec(dir)
		if pc[2] <= 0 {
			return 0, 0, Outside
		}
	} else {
		sf := f.s.sc.surfaces[id]
		den := sf.n.dot(dir)
		if den == 0 {
			return 0, 0, Outside
		}
		lam := (sf.off - sf.n.dot(f.centre)) / den
		pc = toCamera(f.rs, f.ts, f.centre.add(dir.scale(lam)))
		if pc[2] <= nearZM {
			return 0, 0, Outside
		}
	}
	x, y = cam.projectCam(pc)
	xi, yi := int(math.Round(x)), int(math.Round(y))
	switch {
	case xi < 0 || yi < 0 || xi >= w || yi >= h:
		return x, y, Outside
	case f.source.Surface[yi*w+xi] == id:
		return x, y, Seen
	}
	return x, y, Hidden
}

// writeGroundAndSky fills r.geom for the rows the ground and sky passes
// draw: the sky above the horizon, the ground below it (for rows the
// horizon crosses, by the direction of each pixel's ray, as renderSky's
// mask).
func (r *renderer) writeGroundAndSky() {
	skyEnd, groundEnd := r.horizon()
	zr := vec3{r.cam.rVC[0][2], r.cam.rVC[1][2], r.cam.rVC[2][2]} // vehicle up in camera axes
	for v := 0; v < r.h; v++ {
		row := r.geom[v*r.w : (v+1)*r.w]
		switch {
		case v < skyEnd:
			fill(row, SurfaceSky)
		case v >= groundEnd:
			fill(row, SurfaceGround)
		default:
			for u := range row {
				d := vec3{(float64(u) - r.cam.cx) / r.cam.fx, (float64(v) - r.cam.cy) / r.cam.fy, 1}
				row[u] = SurfaceGround
				if zr.dot(d) >= 0 {
					row[u] = SurfaceSky
				}
			}
		}
	}
}

func fill(s []int32, v int32) {
	for i := range s {
		s[i] = v
	}
}

// writeQuadGeometry writes surf into r.geom where the mask of rect (in
// r.mask's full-frame coordinates) is set.
func (r *renderer) writeQuadGeometry(rect [4]int, surf int32) {
	m, err := r.mask.DataPtrUint8()
	if err != nil {
		return
	}
	for y := rect[1]; y < rect[3]; y++ {
		for x := rect[0]; x < rect[2]; x++ {
			if m[y*r.w+x] != 0 {
				r.geom[y*r.w+x] = surf
			}
		}
	}
}

// VehiclePlane returns, for scoring and diagnosis, the vertical plane of a
// post's or facade's surface in the vehicle frame of frame i: the points
// (x, y, z) of that frame's vehicle coordinates (ISO 8855) with
// n[0] x + n[1] y = offM, n a horizontal unit vector. ok is false for the
// sky, the ground, road users, unknown ids and frames out of range.
func (s *Scene) VehiclePlane(i int, surface int32) (n [2]float64, offM float64, ok bool) {
	if i < 0 || i >= s.cfg.frameCount() || surface < firstQuadSurface || int(surface) >= len(s.sc.surfaces) {
		return n, 0, false
	}
	p := s.tr.PoseAt(s.cfg.captureUs(i))
	sf := s.sc.surfaces[surface]
	// World W = Rz(yaw) P + t, so n·W = off is (Rz(yaw)ᵀ n)·P = off - n·t.
	c, sn := math.Cos(p.YawRad), math.Sin(p.YawRad)
	n = [2]float64{c*sf.n[0] + sn*sf.n[1], -sn*sf.n[0] + c*sf.n[1]}
	return n, sf.off - sf.n[0]*p.XM - sf.n[1]*p.YM, true
}
