package predictor

import (
	"image"
	"math"
	"os"
	"path/filepath"
	"slices"
	"testing"

	"gocv.io/x/gocv"

	"stopgap/filter"
)

// TestMoversOnVtest: on a real fixed-camera video with people walking
// (vtest.avi, Debian's opencv-doc examples; zero vehicle motion), the marks
// made from frames i-b and i (b frames: the default baseline) must cover the pixels that truly changed
// between frame i and frame i+k (the picture a gap of k frames would hold),
// for gap ages up to 300 ms. Truly changed: grey-level difference above 30
// after a 5x5 Gaussian blur (our threshold, not a published one). Recall is
// the share of changed pixels inside a mark's zone, precision the share of
// marked pixels that changed.
func TestMoversOnVtest(t *testing.T) {
	path := filepath.Join(opencvData, "vtest.avi")
	if _, err := os.Stat(path); err != nil {
		t.Skipf("opencv-doc example data not installed (%v); install the Debian package opencv-doc", err)
	}
	vc, err := gocv.VideoCaptureFile(path)
	if err != nil {
		t.Fatal(err)
	}
	defer vc.Close()
	fps := vc.Get(gocv.VideoCaptureFPS)
	if !(fps > 0) {
		t.Fatalf("vtest.avi reports %g fps", fps)
	}
	const nFrames = 48
	frames := make([]gocv.Mat, 0, nFrames)
	defer func() {
		for _, f := range frames {
			f.Close()
		}
	}()
	for len(frames) < nFrames {
		m := gocv.NewMat()
		if !vc.Read(&m) || m.Empty() {
			m.Close()
			break
		}
		frames = append(frames, m)
	}
	if len(frames) < nFrames {
		t.Fatalf("read %d frames of vtest.avi, want %d", len(frames), nFrames)
	}
	w, h := frames[0].Cols(), frames[0].Rows()
	cam := Camera{Width: w, Height: h, Fx: float64(w), Fy: float64(w), Cx: float64(w) / 2, Cy: float64(h) / 2, HeightM: 3, PitchDeg: 20}
	det, err := NewMoverDetector(MoverOptions{})
	if err != nil {
		t.Fatal(err)
	}
	defer det.Close()
	dtUs := int64(math.Round(1e6 / fps))
	maxK := int(math.Floor(0.3 * fps))
	// The frame the Filler would compare with: the oldest at most the
	// baseline older (2 frames at vtest.avi's 10 fps).
	base := max(1, int(math.Floor(DefaultMoverBaselineMs/1000*fps+1e-9)))
	grey := func(m gocv.Mat) gocv.Mat {
		g := gocv.NewMat()
		gocv.CvtColor(m, &g, gocv.ColorBGRToGray)
		gocv.GaussianBlur(g, &g, image.Pt(5, 5), 0, 0, gocv.BorderReflect101)
		return g
	}
	var changed, hit, marked, markedChanged float64
	var model MoverModel
	movers := 0
	for i := 4; i+maxK < len(frames); i += 6 {
		if err := det.Detect(frames[i-base], frames[i], cam, filter.Motion{T1Us: int64(base) * dtUs}, math.Inf(1), nil, nil, &model); err != nil {
			t.Fatal(err)
		}
		movers += len(model.Movers)
		gi := grey(frames[i])
		for k := 1; k <= maxK; k++ {
			gk := grey(frames[i+k])
			d := gocv.NewMat()
			gocv.AbsDiff(gi, gk, &d)
			db := bytesOf(t, d)
			ageMs := float64(int64(k)*dtUs) / 1000
			for y := 0; y < h; y++ {
				for x := 0; x < w; x++ {
					in := false
					for _, mv := range model.Movers {
						if image.Pt(x, y).In(mv.Zone(ageMs)) {
							in = true
							break
						}
					}
					ch := db[y*w+x] > 30
					if ch {
						changed++
						if in {
							hit++
						}
					}
					if in {
						marked++
						if ch {
							markedChanged++
						}
					}
				}
			}
			d.Close()
			gk.Close()
		}
		gi.Close()
	}
	recall, precision := hit/changed, markedChanged/math.Max(1, marked)
	t.Logf("vtest.avi %dx%d at %.1f fps, gaps up to %d frames: %d movers, recall %.3f, precision %.3f (changed %.0f px, marked %.0f px)",
		w, h, fps, maxK, movers, recall, precision, changed, marked)
	if changed == 0 || recall < 0.8 {
		t.Errorf("recall %.3f over %.0f changed pixels, want >= 0.8", recall, changed)
	}
	// Measured 0.30 (marks as tight as the change, zones grown from the
	// apparent speed); 0.25 with the earlier fixed margins.
	if precision < 0.28 {
		t.Errorf("precision %.3f, want >= 0.28", precision)
	}
}

// TestFillerMarksMover: a block that moved between the two real frames
// (the vehicle standing still) is marked on the PREDICTED frame; the marks
// stay inside the mover's zone and its tag, and the unlabelled (scored)
// picture carries no mark.
func TestFillerMarksMover(t *testing.T) {
	c := uprightCam()
	f, err := NewFiller(FillerConfig{Camera: c, Policy: DefaultPolicy(), Motion: &fakeMotion{SigmaPerS: 0.01}})
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	unl := gocv.NewMat()
	defer unl.Close()
	f.Unlabelled = &unl
	prev := texturedFrame(t, c.Width, c.Height, 7)
	defer prev.Close()
	last := prev.Clone()
	defer last.Close()
	blk := image.Rect(150, 100, 190, 150)
	roi := last.Region(blk.Add(image.Pt(12, 0)))
	roi.SetTo(gocv.NewScalar(20, 220, 40, 0))
	roi.Close()
	dst := gocv.NewMat()
	defer dst.Close()
	if _, err := f.Live(prev, 0, &dst); err != nil {
		t.Fatal(err)
	}
	if _, err := f.Live(last, 33_333, &dst); err != nil {
		t.Fatal(err)
	}
	tk, err := f.Missing(133_333, &dst)
	if err != nil || tk.State != StatePredicted {
		t.Fatalf("tick %+v, err %v; want PREDICTED", tk, err)
	}
	if tk.Movers != 1 || len(f.movers.Movers) != 1 {
		t.Fatalf("%d marks drawn, %d movers; want 1", tk.Movers, len(f.movers.Movers))
	}
	mv := f.movers.Movers[0]
	if !blk.Add(image.Pt(12, 0)).In(mv.Box.Inset(-2)) {
		t.Errorf("mover box %v does not cover the block's last place %v", mv.Box, blk.Add(image.Pt(12, 0)))
	}
	// Unlabelled equals the labelled frame outside the label and the marks.
	zone := mv.Zone(tk.AgeMs).Inset(-2)
	tag := image.Rect(mv.Box.Min.X, mv.Box.Min.Y-40, mv.Box.Max.X+60, mv.Box.Min.Y)
	in := image.Rect(0, 0, c.Width, c.Height).Inset(BorderPx(c.Height))
	a, b := bytesOf(t, dst), bytesOf(t, unl)
	diff := 0
	for y := 0; y < c.Height; y++ {
		for x := 0; x < c.Width; x++ {
			p := image.Pt(x, y)
			i := 3 * (y*c.Width + x)
			if a[i] != b[i] || a[i+1] != b[i+1] || a[i+2] != b[i+2] {
				diff++
				if p.In(in) && !p.In(zone) && !p.In(tag) && y > 40 {
					t.Fatalf("pixel %v changed outside the label and the mover's zone %v", p, zone)
				}
			}
		}
	}
	if diff == 0 {
		t.Error("labelled and unlabelled frames are equal")
	}
}

// TestMarksOnMovingCamera: a vehicle drives at 10 m/s through a static
// scene that follows the road and far maps exactly (frames sampled from a
// larger texture), while a textured block crosses the picture at 150 px/s.
// From the PREDICTED frames of a gap (ages 33 to 300 ms) the marks are
// scored against the exact masks: recall is the share of truly changed
// pixels (the block's place at the target time and its place in the held
// frame, outside the label) inside a mark's zone, precision the share of
// zone pixels that truly changed. Recall must reach 0.8; precision is
// reported, not asserted: it falls short of 0.5 (about 0.24 here: the
// apparent velocity is overestimated and the zone grows to cover that).
func TestMarksOnMovingCamera(t *testing.T) {
	c := uprightCam()
	const dtUs = 33_333
	const speedMps, blockPxPerS = 10.0, 150.0
	big := texturedFrame(t, 2*c.Width, 2*c.Height, 11)
	defer big.Close()
	bigV, err := matView(&big)
	if err != nil {
		t.Fatal(err)
	}
	blockTex := texturedFrame(t, 36, 44, 12)
	defer blockTex.Close()
	block := func(tUs int64) image.Rectangle {
		x := 60 + int(math.Round(blockPxPerS*float64(tUs)/1e6))
		return image.Rect(x, 95, x+36, 95+44)
	}
	// frame renders the picture at time tUs: the static scene seen after
	// the vehicle moved speed·t, and the block.
	frame := func(tUs int64) gocv.Mat {
		m := filter.Motion{T1Us: tUs, DxM: speedMps * float64(tUs) / 1e6}
		g, _ := GroundHomography(c, m)
		f := FarHomographyPlanar(c, m.DxM, 0, 0, math.Inf(1))
		gi, fi := mustInverse(t, g), mustInverse(t, f)
		out := gocv.NewMatWithSize(c.Height, c.Width, gocv.MatTypeCV8UC3)
		ov, err := matView(&out)
		if err != nil {
			t.Fatal(err)
		}
		off := Homography{{1, 0, float64(c.Width) / 2}, {0, 1, float64(c.Height) / 2}, {0, 0, 1}}
		hz, _ := c.Horizon().RowAt(0)
		split := int(math.Ceil(hz))
		if _, err := warpBGR(ov.rows(0, split), bigV, off.Mul(fi), 0, 0, NeutralGrey, warpPathBest); err != nil {
			t.Fatal(err)
		}
		if _, err := warpBGR(ov.rows(split, c.Height), bigV, off.Mul(gi), 0, split, NeutralGrey, warpPathBest); err != nil {
			t.Fatal(err)
		}
		roi := out.Region(block(tUs))
		blockTex.CopyTo(&roi)
		roi.Close()
		return out
	}
	f, err := NewFiller(FillerConfig{Camera: c, Policy: DefaultPolicy(), Motion: &fakeMotion{SpeedMps: speedMps, SigmaPerS: 0.01}})
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	dst := gocv.NewMat()
	defer dst.Close()
	for _, tUs := range []int64{0, dtUs} {
		fr := frame(tUs)
		if _, err := f.Live(fr, tUs, &dst); err != nil {
			t.Fatal(err)
		}
		fr.Close()
	}
	in := image.Rect(0, 0, c.Width, c.Height).Inset(BorderPx(c.Height))
	in.Min.Y += 30 // below the PREDICTED text box
	held := block(dtUs)
	var changed, hit, marked, markedChanged float64
	for k := int64(1); k <= 9; k++ {
		target := dtUs + k*dtUs
		tk, err := f.Missing(target, &dst)
		if err != nil || tk.State != StatePredicted {
			t.Fatalf("tick at %d us: %+v %v", target, tk, err)
		}
		// The marks are the held frame's movers placed by PlaceMarks, the
		// one path a diagnosis uses to place boxes of its own.
		placed, err := f.PlaceMarks(nil, f.HeldMovers(), tk.Motion)
		if err != nil || len(placed) == 0 || !slices.Equal(placed, f.Marks()) {
			t.Fatalf("tick at %d us: PlaceMarks of the held movers gives %v (%v), the tick marked %v", target, placed, err, f.Marks())
		}
		now := block(target)
		for y := in.Min.Y; y < in.Max.Y; y++ {
			for x := in.Min.X; x < in.Max.X; x++ {
				p := image.Pt(x, y)
				ch := p.In(now) || p.In(held)
				mk := false
				for _, mv := range f.movers.Movers {
					mk = mk || p.In(mv.Zone(tk.AgeMs))
				}
				if ch {
					changed++
					if mk {
						hit++
					}
				}
				if mk {
					marked++
					if ch {
						markedChanged++
					}
				}
			}
		}
	}
	recall, precision := hit/changed, markedChanged/math.Max(1, marked)
	t.Logf("%d movers %v; recall %.3f, precision %.3f over ages 33..300 ms", len(f.movers.Movers), f.movers.Movers, recall, precision)
	if len(f.movers.Movers) == 0 || recall < 0.8 {
		t.Errorf("recall %.3f with %d movers, want >= 0.8", recall, len(f.movers.Movers))
	}
}

// TestStaticAtBase: a region is the parallax of a static upright at its
// base only when that upright explains its change clearly better than the
// compensation did and its own shift adds little.
func TestStaticAtBase(t *testing.T) {
	const w, h = 40, 30
	// A textured newer frame and a compensated older frame that matches it
	// (cc 0) or is the texture shifted by 3 px (a misfit, cc large).
	tex := func(x, y int) byte { return byte((x*37 + y*91 + (x*y)%13*17) % 251) }
	b := make([]byte, w*h)
	same := make([]byte, w*h)
	misfit := make([]byte, w*h)
	lab := make([]int32, w*h)
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			b[y*w+x], same[y*w+x], misfit[y*w+x] = tex(x, y), tex(x, y), tex(x+3, y)
			if x >= 10 && x < 30 && y >= 5 && y < 25 {
				lab[y*w+x] = 1
			}
		}
	}
	box := image.Rect(10, 5, 30, 25)
	if cc := regionCost(misfit, b, lab, 1, w, h, box, affine{k: 1}, 0, 0); cc < 20 {
		t.Fatalf("misfit residual %.1f, want a clear misfit (>= 20)", cc)
	}
	for _, tc := range []struct {
		name   string
		comp   []byte
		c0, cb float64
		want   bool
	}{
		{"static upright explains, own shift adds little", misfit, 5, 4.5, true},
		{"static upright explains, own shift much better", misfit, 5, 2, false},
		{"static upright no better than the compensation", misfit, 60, 55, false},
		{"compensation already fits", same, 5, 5, false},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if got := staticAtBase(tc.comp, b, lab, 1, w, h, box, tc.c0, tc.cb); got != tc.want {
				t.Errorf("staticAtBase(c0 %.1f, cb %.1f) = %v, want %v", tc.c0, tc.cb, got, tc.want)
			}
		})
	}
}

// TestStaticSweep: a region whose newer pixels are the older frame as a
// static upright standing at a row inside the region would have moved (a
// post whose region reaches below its foot) is explained by the sweep, not
// by an upright standing at the region's bottom; a region whose pixels
// match no static upright is not.
func TestStaticSweep(t *testing.T) {
	c := uprightCam()
	w, h := c.Width, c.Height
	dx, dy, dyaw := invertPlanar(2, 0, 0) // the vehicle moved 2 m ahead
	ua := uprightAt{back: GroundHomographyPlanar(c, dx, dy, dyaw), s: 1, sy: 1, hz: c.Horizon()}
	tex := func(x, y int) byte { return byte((x*37 + y*91 + (x*y)%13*17) % 251) }
	older := make([]byte, w*h)
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			older[y*w+x] = tex(x, y)
		}
	}
	box := image.Rect(200, 100, 240, 160)
	const foot = 130 // inside the region, 30 rows above its bottom
	af, ok := ua.at(box.Min.X, box.Max.X, foot)
	if !ok {
		t.Fatalf("no upright map at row %d", foot)
	}
	lab := make([]int32, w*h)
	post := make([]byte, w*h)  // newer frame: the static upright at foot
	mover := make([]byte, w*h) // newer frame: texture matching no upright
	for y := box.Min.Y; y < box.Max.Y; y++ {
		for x := box.Min.X; x < box.Max.X; x++ {
			lab[y*w+x] = 1
			xx, yy := int(math.Round(af.k*float64(x)+af.ox)), int(math.Round(af.k*float64(y)+af.oy))
			post[y*w+x] = older[yy*w+xx]
			mover[y*w+x] = tex(x*3+7, y*5+1)
		}
	}
	bottom, ok := ua.at(box.Min.X, box.Max.X, box.Max.Y)
	if !ok {
		t.Fatal("no upright map at the region's bottom")
	}
	for _, tc := range []struct {
		name      string
		newer     []byte
		wantBelow float64 // the sweep's residual is below this
		wantAbove float64 // ... and above this
	}{
		{"static upright with its foot inside", post, 1, -1},
		{"nothing static", mover, math.Inf(1), 30},
	} {
		t.Run(tc.name, func(t *testing.T) {
			sw := staticSweep(older, tc.newer, lab, 1, w, h, box, ua)
			if !(sw < tc.wantBelow && sw > tc.wantAbove) {
				t.Errorf("staticSweep = %.1f, want in (%g, %g)", sw, tc.wantAbove, tc.wantBelow)
			}
		})
	}
	if c := leastNear(older, post, lab, 1, w, h, box, bottom); c < 20 {
		t.Errorf("an upright at the region's bottom explains the post (residual %.1f), want >= 20: the test does not need the sweep", c)
	}
}

// TestStaticInside: the sweep's decision (moverSweepGain,
// moverSweepOwnGain).
func TestStaticInside(t *testing.T) {
	for _, tc := range []struct {
		name       string
		sw, cc, cb float64
		want       bool
	}{
		{"static upright explains, own shift adds nothing", 10, 30, 10, true},
		{"static upright explains, own shift a little better", 10, 30, 9.7, true},
		{"static upright explains, own shift a tenth better", 10, 30, 9.1, false},
		{"static upright explains, own shift clearly better", 10, 30, 7, false},
		// A van passing close beside the vehicle (simdrive --traffic,
		// seed 2, held frame 540): uniformly coloured, so a static upright
		// explains it almost as well as its own motion.
		{"van beside the vehicle, own shift 9 % better", 31.1, 55.4, 28.4, false},
		{"static upright barely better than the compensation", 25, 30, 25, false},
		{"no foot on the road", math.Inf(1), 30, 20, false},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if got := staticInside(tc.sw, tc.cc, tc.cb); got != tc.want {
				t.Errorf("staticInside(sw %.1f, cc %.1f, cb %.1f) = %v, want %v", tc.sw, tc.cc, tc.cb, got, tc.want)
			}
		})
	}
}

// TestShownBox: the place the picture shows a held box at moves each of its
// corners and edge midpoints with the map the synthesis uses there: the
// road map below the horizon, an upright segment's plane over the segment
// (here a plane facing the camera at 20 m, whose map is FarHomographyPlanar,
// TestPlaneHomographyMatchesGroundAndFar), and Zone includes it.
func TestShownBox(t *testing.T) {
	c := uprightCam()
	m := filter.Motion{T1Us: 200_000, DxM: 2, DyawRad: 0.02}
	road := GroundHomographyPlanar(c, m.DxM, m.DyM, m.DyawRad)
	far := FarHomographyPlanar(c, m.DxM, m.DyM, m.DyawRad, 20)
	box := image.Rect(200, 110, 240, 150) // below the horizon
	hz := c.Horizon()
	for _, p := range []image.Point{box.Min, {box.Max.X - 1, box.Max.Y - 1}} {
		if hz.SignedDistance(float64(p.X), float64(p.Y)) <= 0 {
			t.Fatalf("box corner %v is not below the horizon", p)
		}
	}
	// bounds returns the bounding box of the 3x3 points mapped by hm.
	bounds := func(hm Homography) image.Rectangle {
		var r image.Rectangle
		for _, y := range []float64{110, 129.5, 149} {
			for _, x := range []float64{200, 219.5, 239} {
				u, v, ok := hm.Apply(x, y)
				if !ok {
					t.Fatalf("(%g,%g) does not map", x, y)
				}
				r = r.Union(image.Rect(int(math.Floor(u)), int(math.Floor(v)), int(math.Floor(u))+1, int(math.Floor(v))+1))
			}
		}
		return r
	}
	facing := Plane{Normal: [3]float64{0, 0, 1}, DistM: 20}
	for _, tc := range []struct {
		name string
		up   *UprightModel
		want image.Rectangle
	}{
		{"road", nil, bounds(road)},
		{"segment elsewhere", &UprightModel{Segments: []UprightSegment{{Col0: 0, Col1: 100, TopRow: -0.5, Plane: facing, BaseRow0: 170, BaseRow1: 170}}}, bounds(road)},
		{"segment over the box", &UprightModel{Segments: []UprightSegment{{Col0: 190, Col1: 250, TopRow: 100, Plane: facing, BaseRow0: 160, BaseRow1: 160}}}, bounds(far)},
	} {
		t.Run(tc.name, func(t *testing.T) {
			got := shownBox(c, m, road, far, tc.up, box)
			if got != tc.want {
				t.Errorf("shownBox = %v, want %v", got, tc.want)
			}
			if got.Eq(box) {
				t.Errorf("shownBox = the held box %v: the motion moved nothing", box)
			}
			mv := Mover{Box: box, Shown: got}
			if z := mv.Zone(100); !got.In(z) || !box.In(z) {
				t.Errorf("Zone(100) = %v, want it to hold Box %v and Shown %v", z, box, got)
			}
		})
	}
}

// TestRoadUserTopRow: the row roadUserTopRow gives for a foot seen at a
// pixel is where the camera model (camera.ProjectVehiclePointPinhole, whose
// projection is checked against OpenCV's projectPoints in camera_test.go)
// projects the point moverRoadUserHeightM above that foot standing on the
// pavement, moverKerbM above the road; and there is none for a pixel at or
// above the horizon.
func TestRoadUserTopRow(t *testing.T) {
	for name, c := range testCameras() {
		for _, p := range [][2]float64{{4, 0}, {8, 2.5}, {15, -3}, {40, 1}} {
			foot := [3]float64{p[0], p[1], moverKerbM}
			head := [3]float64{p[0], p[1], moverKerbM + moverRoadUserHeightM}
			u, v, err := c.ProjectVehiclePointPinhole(foot)
			if err != nil {
				t.Fatal(err)
			}
			_, want, err := c.ProjectVehiclePointPinhole(head)
			if err != nil {
				t.Fatal(err)
			}
			got, ok := roadUserTopRow(c, u, v)
			if !ok || math.Abs(got-want) > 1e-6 {
				t.Errorf("%s, foot %v m at (%.1f, %.1f): top row %.6f (ok %v), want %.6f", name, foot, u, v, got, ok, want)
			}
		}
		hz := c.Horizon()
		r, _ := hz.RowAt(c.Cx)
		for _, v := range []float64{r, r - 20} {
			if got, ok := roadUserTopRow(c, c.Cx, v); ok {
				t.Errorf("%s: top row %.1f for a foot at row %.1f (horizon %.1f), want none", name, got, v, r)
			}
		}
	}
}

// TestMoverCutAtRoadUserHeight: a block that appeared between two frames of
// a still camera, standing on the road and reaching far above the height of
// any road user at its foot's distance (its foot taken moverFootSlackPx
// below its region), is marked from its foot up to that height only; the same block with its foot at the picture's bottom (where
// a near thing's foot may be cut off) keeps its whole height.
func TestMoverCutAtRoadUserHeight(t *testing.T) {
	c := uprightCam()
	for _, tc := range []struct {
		name      string
		blk       image.Rectangle
		wantTopAt bool // the box's top at the road user's height, else the block's
	}{
		{"foot on the road", image.Rect(150, 20, 190, 150), true},
		{"foot cut off", image.Rect(150, 2, 190, c.Height), false},
	} {
		prev := texturedFrame(t, c.Width, c.Height, 7)
		last := prev.Clone()
		roi := last.Region(tc.blk)
		roi.SetTo(gocv.NewScalar(20, 220, 40, 0))
		roi.Close()
		d, err := NewMoverDetector(MoverOptions{})
		if err != nil {
			t.Fatal(err)
		}
		var model MoverModel
		m := filter.Motion{T0Us: 0, T1Us: 200_000, Cov: [3][3]float64{{1e-4, 0, 0}, {0, 1e-4, 0}, {0, 0, 1e-6}}}
		err = d.Detect(prev, last, c, m, math.Inf(1), nil, nil, &model)
		d.Close()
		prev.Close()
		last.Close()
		if err != nil {
			t.Fatal(err)
		}
		if len(model.Movers) != 1 {
			t.Fatalf("%s: %d movers, want 1", tc.name, len(model.Movers))
		}
		box := model.Movers[0].Box
		want := float64(tc.blk.Min.Y)
		if tc.wantTopAt {
			// The detector's scale is 1 on this 320 px camera.
			top, ok := roadUserTopRow(c, float64(tc.blk.Min.X+tc.blk.Max.X)/2, float64(tc.blk.Max.Y+moverFootSlackPx)-0.5)
			if !ok {
				t.Fatal("no road user top for the block's foot")
			}
			want = top
		}
		if math.Abs(float64(box.Min.Y)-want) > 2 || box.Max.Y < tc.blk.Max.Y-2 {
			t.Errorf("%s: box %v, want its top at row %.1f (block %v) and its foot kept", tc.name, box, want, tc.blk)
		}
	}
}

// TestBestShiftAtNearBound: when the near search's best shift lies at its
// bound, a farther shift that matches better by less than a fifth (but
// more than moverBoundGain asks) is taken; when the near best lies inside,
// or the farther shift is no better, the near result stays.
func TestBestShiftAtNearBound(t *testing.T) {
	const w, h = 64, 30
	// The older frame: a ramp across (3 grey levels a column) and rows
	// that differ without a period (a vertical shift does not match).
	older := func(x, y int) int { return 3*x + (y*y)%47 }
	// The newer frame over the region is the older one shifted by shift
	// columns, with ±10 grey levels of alternating noise: the cost at a
	// shift d is then max(10, 3|shift-d|), so at the near search's
	// reach (9) it is 12 for a true shift of 13, and 10 from 10 on (10/12
	// = 0.83: better, but not by a fifth).
	box := image.Rect(10, 5, 40, 25)
	frames := func(shift int) (c, b []byte, lab []int32) {
		c, b, lab = make([]byte, w*h), make([]byte, w*h), make([]int32, w*h)
		for y := 0; y < h; y++ {
			for x := 0; x < w; x++ {
				c[y*w+x] = byte(older(x, y))
				if image.Pt(x, y).In(box) {
					n := 10
					if (x+y)%2 == 1 {
						n = -10
					}
					b[y*w+x], lab[y*w+x] = byte(older(x+shift, y)+n), 1
				}
			}
		}
		return c, b, lab
	}
	if older(w-1, h-1) > 255 {
		t.Fatal("the test's ramp overflows a byte")
	}
	for _, tc := range []struct {
		name         string
		shift, r     int
		wantX, wantY int
	}{
		// Near best at 9 (cost 12), farther from 10 on (cost 10).
		{"near best at its bound, farther a little better", 13, 16, 10, 0},
		// Without a farther search the near best stays.
		{"no farther search", 13, 8, 9, 0},
		// The near best is inside the near search (cost 10 at 4 to 10,
		// the first found kept): no farther one is taken.
		{"near best inside", 7, 16, 4, 0},
	} {
		t.Run(tc.name, func(t *testing.T) {
			c, b, lab := frames(tc.shift)
			dx, dy, _, _ := bestShift(c, b, lab, 1, w, h, box, affine{k: 1}, tc.r)
			if dx != tc.wantX || dy != tc.wantY {
				t.Errorf("bestShift = (%d, %d), want (%d, %d)", dx, dy, tc.wantX, tc.wantY)
			}
		})
	}
}

// TestBodyToSide: the last known place of a thing moving toward a side
// reaches over the columns that look like its region's leading column, up
// to the side or to where the picture changes.
func TestBodyToSide(t *testing.T) {
	const w, h = 40, 10
	// Background 100, a body of grey 180 from column 5 to 24 (rows 2 to
	// 7); the region is columns 15 to 30, its leading side the body.
	img := func(bodyFrom int) []byte {
		b := make([]byte, w*h)
		for y := 0; y < h; y++ {
			for x := 0; x < w; x++ {
				b[y*w+x] = 100
				if x >= bodyFrom && x < 25 && y >= 2 && y < 8 {
					b[y*w+x] = 180
				}
			}
		}
		return b
	}
	for _, tc := range []struct {
		name     string
		bodyFrom int
		x0, x1   int
		dir      int
		want     int
	}{
		{"body ends inside the picture", 5, 15, 30, -1, 5},
		{"body reaches the picture's side", 0, 15, 30, -1, 0},
		{"toward the right over background only", 5, 10, 30, 1, w},
		{"leading column unlike its neighbour", 5, 25, 30, -1, 25},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if got := bodyToSide(img(tc.bodyFrom), w, tc.x0, tc.x1, 2, 8, tc.dir, 20); got != tc.want {
				t.Errorf("bodyToSide = %d, want %d", got, tc.want)
			}
		})
	}
}
