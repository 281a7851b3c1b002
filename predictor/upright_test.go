package predictor

import (
	"image"
	"math"
	"testing"

	"gocv.io/x/gocv"

	"stopgap/filter"
)

// uprightCam is a 320x180 forward camera without roll.
func uprightCam() Camera {
	return Camera{Width: 320, Height: 180, Fx: 250, Fy: 250, Cx: 160, Cy: 90, HeightM: 1.4, PitchDeg: 3, XOffsetM: 1.8}
}

// TestPlaneHomographyMatchesGroundAndFar: the road plane (n_up, -h) and the
// plane facing the camera (e_z, D) reproduce GroundHomographyPlanar and
// FarHomographyPlanar, which are checked against cv::projectPoints in
// camera_test.go and fardepth_test.go.
func TestPlaneHomographyMatchesGroundAndFar(t *testing.T) {
	c := smallCam()
	const dx, dy, yaw = 1.3, -0.2, 0.04
	for _, tc := range []struct {
		name string
		got  Homography
		want Homography
	}{
		{"ground", PlaneHomography(c, dx, dy, yaw, Plane{c.GroundNormalCamera(), -c.HeightM}), GroundHomographyPlanar(c, dx, dy, yaw)},
		{"far 20 m", PlaneHomography(c, dx, dy, yaw, Plane{[3]float64{0, 0, 1}, 20}), FarHomographyPlanar(c, dx, dy, yaw, 20)},
	} {
		t.Run(tc.name, func(t *testing.T) {
			for i := range tc.got {
				for j := range tc.got[i] {
					if math.Abs(tc.got[i][j]-tc.want[i][j]) > 1e-9*(1+math.Abs(tc.want[i][j])) {
						t.Fatalf("got %v, want %v", tc.got, tc.want)
					}
				}
			}
		})
	}
}

// TestWallHomographyMapsWallPoints: points of a wall along the road (vehicle
// y = 4 m), projected by the pinhole model before and after a planar motion,
// are mapped onto each other by the wall's homography, and the wall's foot
// (z = 0) lies on its base line. Independent recomputation: the vehicle-frame
// transform P1 = Rz(ψ)ᵀ (P0 - D) and Camera.ProjectVehiclePointPinhole.
func TestWallHomographyMapsWallPoints(t *testing.T) {
	c := smallCam()
	const dx, dy, yaw = 1.1, 0.1, -0.03
	p := verticalPlane(c, [3]float64{0, 1, 0}, 4)
	h := PlaneHomography(c, dx, dy, yaw, p)
	base := baseLine(c, p)
	s, co := math.Sincos(yaw)
	for _, pt := range [][3]float64{{8, 4, 0}, {12, 4, 2.5}, {20, 4, 0.7}, {30, 4, 6}} {
		u0, v0, err := c.ProjectVehiclePointPinhole(pt)
		if err != nil {
			t.Fatal(err)
		}
		q := [3]float64{pt[0] - dx, pt[1] - dy, pt[2]}
		p1 := [3]float64{co*q[0] + s*q[1], -s*q[0] + co*q[1], q[2]}
		u1, v1, err := c.ProjectVehiclePointPinhole(p1)
		if err != nil {
			t.Fatal(err)
		}
		x, y, ok := h.Apply(u0, v0)
		if !ok || math.Hypot(x-u1, y-v1) > 1e-6 {
			t.Errorf("wall point %v: H maps (%.4f, %.4f) to (%.6f, %.6f), projection (%.6f, %.6f)", pt, u0, v0, x, y, u1, v1)
		}
		if pt[2] == 0 {
			if d := base[0]*u0 + base[1]*v0 + base[2]; math.Abs(d)/math.Hypot(base[0], base[1]) > 1e-6 {
				t.Errorf("wall foot %v at (%.3f, %.3f) is %.2g px off the base line", pt, u0, v0, d)
			}
		}
	}
}

// wallScene returns a textured frame and the same frame as seen before a
// motion if everything in it were on plane p: prev = last warped by the
// plane's map from the newer to the older frame.
func wallScene(t *testing.T, c Camera, m filter.Motion, p Plane) (prev, last gocv.Mat) {
	t.Helper()
	last = texturedFrame(t, c.Width, c.Height, 3)
	dx, dy, yaw := invertPlanar(m.DxM, m.DyM, m.DyawRad)
	hm := gocv.NewMatWithSize(3, 3, gocv.MatTypeCV64F)
	defer hm.Close()
	if err := setMat3(&hm, PlaneHomography(c, dx, dy, yaw, p)); err != nil {
		t.Fatal(err)
	}
	prev = gocv.NewMat()
	gocv.WarpPerspectiveWithParams(last, &prev, hm, image.Pt(c.Width, c.Height), gocv.InterpolationLinear, gocv.BorderReflect101, neutralFill)
	return prev, last
}

// TestUprightEstimateFindsWall: where a wall to the left can stand (left of
// the vanishing point), the estimate picks exactly that wall in most bands:
// one 4 m away, and one 17.5 m away as the building fronts of a suburban
// street (simdrive's default drive puts them 12.5 to 22 m from the axis);
// with a short baseline it finds nothing.
func TestUprightEstimateFindsWall(t *testing.T) {
	for _, tc := range []struct {
		name  string
		wallM float64
		motM  float64
	}{
		{"4 m", 4, 1.2},
		{"17.5 m", 17.5, 2},
	} {
		t.Run(tc.name, func(t *testing.T) {
			c := uprightCam()
			m := filter.Motion{T0Us: 0, T1Us: 100_000, DxM: tc.motM}
			wall := verticalPlane(c, [3]float64{0, 1, 0}, tc.wallM)
			prev, last := wallScene(t, c, m, wall)
			defer prev.Close()
			defer last.Close()
			e, err := NewUprightEstimator(UprightOptions{BandPx: 16})
			if err != nil {
				t.Fatal(err)
			}
			defer e.Close()
			var model UprightModel
			if err := e.Estimate(prev, last, c, m, math.Inf(1), &model); err != nil {
				t.Fatal(err)
			}
			possible, right, worst := 0, 0, 0.0
			hzRow, _ := c.Horizon().RowAt(0)
			for c0 := 0; c0+16 <= c.Width; c0 += 16 {
				seg, ok := segment(c, wall, c0, c0+16, hzRow)
				if !ok || seg.BaseRow0 > float64(c.Height) || seg.BaseRow1 < hzRow+3 {
					continue // the wall cannot stand here, its foot is below the image or on the horizon
				}
				possible++
				for _, s := range model.Segments {
					// The plane is refined between the hypotheses and
					// joined with its neighbours (UprightEstimator.refine,
					// joinSegments): the depth of its foot at the band's
					// centre within 3 % of the planted wall's (which is
					// itself a hypothesis), its normal within 5 degrees.
					ang := math.Acos(math.Min(1, dot3(s.Plane.Normal, wall.Normal))) * 180 / math.Pi
					if dd := math.Abs(s.DepthM/seg.DepthM - 1); s.Col0 == c0 && ang < 5 && dd < 0.03 {
						right++
						worst = math.Max(worst, dd)
					}
				}
			}
			t.Logf("%d segments; the planted wall in %d of %d bands where it stands in view, foot depth within %.2f %%", len(model.Segments), right, possible, 100*worst)
			if possible < 4 || float64(right) < 0.75*float64(possible) {
				t.Errorf("the planted wall was found in %d of %d bands, want at least 75%%", right, possible)
			}
			m.DxM = 0.05
			if err := e.Estimate(prev, last, c, m, math.Inf(1), &model); err != nil || len(model.Segments) != 0 {
				t.Errorf("short baseline: %d segments, err %v; want none", len(model.Segments), err)
			}
		})
	}
}

// TestSynthesizeSceneWarpsWall: when the whole held frame is a wall and the
// model says so in some bands, SynthesizeScene reproduces the true next view
// (the held frame warped by the wall's homography) in those bands' images
// far better than the road-and-far warp does.
func TestSynthesizeSceneWarpsWall(t *testing.T) {
	c := uprightCam()
	m := filter.Motion{T0Us: 0, T1Us: 100_000, DxM: 1.0}
	wall := verticalPlane(c, [3]float64{0, 1, 0}, 4)
	last := texturedFrame(t, c.Width, c.Height, 4)
	defer last.Close()
	hw := PlaneHomography(c, m.DxM, m.DyM, m.DyawRad, wall)
	truth := cvWarp(t, last, mustInverse(t, hw), c.Width, c.Height)
	defer truth.Close()
	hzRow, _ := c.Horizon().RowAt(0)
	var model UprightModel
	for c0 := 0; c0 < 96; c0 += 16 {
		seg, ok := segment(c, wall, c0, c0+16, hzRow)
		if !ok {
			t.Fatalf("the wall cannot stand in band %d", c0)
		}
		seg.TopRow = -0.5
		model.Segments = append(model.Segments, seg)
	}
	s, err := NewSynthesizer(c, SynthOptions{})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	scene, plain := gocv.NewMat(), gocv.NewMat()
	defer scene.Close()
	defer plain.Close()
	syn, err := s.SynthesizeScene(last, m, math.Inf(1), &model, &scene)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := s.SynthesizeFar(last, m, math.Inf(1), &plain); err != nil {
		t.Fatal(err)
	}
	// Compare over the wall segments' image, rows above the horizon band
	// and columns 8..80 (inside the image of the six bands).
	tb, sb, pb := bytesOf(t, truth), bytesOf(t, scene), bytesOf(t, plain)
	var es, ep, n float64
	for v := 4; v < int(hzRow)-DefaultBandPx; v++ {
		for u := 8; u < 80; u++ {
			for k := 0; k < 3; k++ {
				i := 3*(v*c.Width+u) + k
				es += math.Abs(float64(sb[i]) - float64(tb[i]))
				ep += math.Abs(float64(pb[i]) - float64(tb[i]))
				n++
			}
		}
	}
	t.Logf("%d segments composited, mean abs error %.2f (scene) vs %.2f (road and far) over %.0f samples; unfilled %.3f",
		syn.UprightSegments, es/n, ep/n, n, syn.UnfilledFraction)
	if syn.UprightSegments != len(model.Segments) || es/n > 2 || es/n > 0.25*ep/n {
		t.Errorf("scene error %.2f, road-and-far %.2f: want the scene under 2 grey levels and under a quarter of the other", es/n, ep/n)
	}
}

func mustInverse(t *testing.T, h Homography) Homography {
	t.Helper()
	i, err := h.Inverse()
	if err != nil {
		t.Fatal(err)
	}
	return i
}

// inQuad reports whether (x, y) is inside the convex quadrilateral q
// (corners in order, either orientation).
func inQuad(q [4][2]float64, x, y float64) bool {
	pos, neg := false, false
	for i := 0; i < 4; i++ {
		a, b := q[i], q[(i+1)%4]
		cr := (b[0]-a[0])*(y-a[1]) - (b[1]-a[1])*(x-a[0])
		pos = pos || cr > 0
		neg = neg || cr < 0
	}
	return !(pos && neg)
}

// TestSynthesizeSceneOwnersBruteForce recomputes, pixel by pixel and in the
// source frame, what SynthesizeScene documents: a pixel whose source point
// under a segment's own map lies in that segment's (clipped) source quad
// shows the nearest such segment; else, if the far map sends it into a
// segment's part above the horizon or the road map into its part below,
// it is disoccluded (exactly NeutralGrey, unfilled) unless that map's
// source lies above its column's top (UprightModel.Tops); else the road and
// far warp's rule applies. The unfilled count must match exactly, without
// column tops and with tops below the segments' TopRow on many columns.
func TestSynthesizeSceneOwnersBruteForce(t *testing.T) {
	c := uprightCam()
	model := streetModel(c)
	if len(model.Segments) < 6 {
		t.Fatalf("only %d segments in the test street", len(model.Segments))
	}
	t.Run("segment tops", func(t *testing.T) { checkSceneOwners(t, c, model) })
	tops := make([]float32, c.Width)
	for _, seg := range model.Segments {
		for u := max(0, seg.Col0); u < min(c.Width, seg.Col1); u++ {
			// Every third column of 8 starts 40 rows lower; others at the top.
			tops[u] = float32(seg.TopRow)
			if u/8%3 == 0 {
				tops[u] += 40
			}
		}
	}
	model.Tops = tops
	t.Run("column tops", func(t *testing.T) { checkSceneOwners(t, c, model) })
	// Stacked segments: behind every other segment, a front twice as far
	// standing above it, seen from 40 rows above its top down to its top.
	model.Tops = nil
	var stacked []UprightSegment
	for i, seg := range model.Segments {
		if i%2 == 1 {
			continue
		}
		hzRow, _ := c.Horizon().RowAt(float64(seg.Col0+seg.Col1-1) / 2)
		up, ok := segment(c, verticalPlane(c, vec3{1, 0, 0}, 2*seg.DepthM), seg.Col0, seg.Col1, hzRow)
		if !ok {
			continue
		}
		up.TopRow, up.ClipRow = seg.TopRow-40, seg.TopRow
		stacked = append(stacked, up)
	}
	if len(stacked) < 2 {
		t.Fatalf("only %d stacked segments in the test street", len(stacked))
	}
	model.Segments = append(model.Segments, stacked...)
	t.Run("stacked", func(t *testing.T) { checkSceneOwners(t, c, model) })
}

// checkSceneOwners is TestSynthesizeSceneOwnersBruteForce for one model.
func checkSceneOwners(t *testing.T, c Camera, model UprightModel) {
	src := noiseFrame(t, c.Width, c.Height, 5)
	defer src.Close()
	s, err := NewSynthesizer(c, SynthOptions{})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	for name, mo := range map[string]filter.Motion{
		"forward":      {T1Us: 100_000, DxM: 1.5},
		"forward-left": {T1Us: 150_000, DxM: 2, DyM: 0.2, DyawRad: 0.08},
		"reverse":      {T1Us: 100_000, DxM: -1},
	} {
		t.Run(name, func(t *testing.T) {
			dst := gocv.NewMat()
			defer dst.Close()
			syn, err := s.SynthesizeScene(src, mo, 30, &model, &dst)
			if err != nil {
				t.Fatal(err)
			}
			out := bytesOf(t, dst)
			gi, fi := mustInverse(t, syn.Ground), mustInverse(t, syn.Far)
			hz := c.Horizon()
			const e = FillTolerancePx
			segs := append([]UprightSegment(nil), model.Segments...)
			sortFarToNear(segs)
			type quadMap struct {
				q   [4][2]float64
				inv Homography
			}
			var own, above, below []quadMap
			for _, seg := range segs {
				hf := PlaneHomography(c, mo.DxM, mo.DyM, mo.DyawRad, seg.Plane)
				x0, x1 := math.Max(float64(seg.Col0)-0.5, -e), math.Min(float64(seg.Col1)-0.5, float64(c.Width-1)+e)
				top := math.Max(seg.TopRow, -e)
				// A stacked segment is seen down to its ClipRow only.
				clip := func(r float64) float64 {
					if seg.ClipRow > 0 {
						return math.Min(r, seg.ClipRow)
					}
					return r
				}
				b0, b1 := clip(math.Min(seg.BaseRow0, float64(c.Height-1)+e)), clip(math.Min(seg.BaseRow1, float64(c.Height-1)+e))
				own = append(own, quadMap{[4][2]float64{{x0, top}, {x1, top}, {x1, b1}, {x0, b0}}, mustInverse(t, hf)})
				ux0, ux1 := float64(seg.Col0)-0.5, float64(seg.Col1)-0.5
				r0, _ := hz.RowAt(ux0)
				r1, _ := hz.RowAt(ux1)
				split := math.Max(math.Max(r0, r1)+1, seg.TopRow)
				above = append(above, quadMap{[4][2]float64{{ux0, seg.TopRow}, {ux1, seg.TopRow}, {ux1, clip(split)}, {ux0, clip(split)}}, fi})
				below = append(below, quadMap{[4][2]float64{{ux0, split}, {ux1, split}, {ux1, math.Max(split, clip(seg.BaseRow1))}, {ux0, math.Max(split, clip(seg.BaseRow0))}}, gi})
			}
			hits := func(qm quadMap, u, v float64) bool {
				x, y, ok := qm.inv.Apply(u, v)
				return ok && inQuad(qm.q, x, y)
			}
			unfilled, hidden, onSeg, lowered := 0, 0, 0, 0
			for v := 0; v < c.Height; v++ {
				for u := 0; u < c.Width; u++ {
					fu, fv := float64(u), float64(v)
					seg := -1
					for k := len(own) - 1; k >= 0; k-- { // nearest first
						if hits(own[k], fu, fv) {
							seg = k
							break
						}
					}
					if seg >= 0 {
						onSeg++
						x, y, ok := own[seg].inv.Apply(fu, fv)
						if !ok || x < -e || y < -e || x > float64(c.Width-1)+e || y > float64(c.Height-1)+e {
							unfilled++
						}
						continue
					}
					isHidden := false
					for k := range above {
						isHidden = isHidden || hits(above[k], fu, fv) || hits(below[k], fu, fv)
					}
					if isHidden && len(model.Tops) == c.Width {
						m := fi
						if hz.SignedDistance(fu, fv) >= 0 {
							m = gi
						}
						x, y, ok := m.Apply(fu, fv)
						if k := int(math.Round(x)); ok && k >= 0 && k < c.Width && y < float64(model.Tops[k]) {
							isHidden = false
							lowered++
						}
					}
					if isHidden {
						hidden++
						unfilled++
						if p := out[3*(v*c.Width+u):]; p[0] != NeutralGrey || p[1] != NeutralGrey || p[2] != NeutralGrey {
							t.Fatalf("disoccluded pixel (%d, %d) is %v, want NeutralGrey", u, v, p[:3])
						}
						continue
					}
					m := fi
					if hz.SignedDistance(fu, fv) >= 0 {
						m = gi
					}
					x, y, ok := m.Apply(fu, fv)
					if !ok || x < -e || y < -e || x > float64(c.Width-1)+e || y > float64(c.Height-1)+e {
						unfilled++
					}
				}
			}
			t.Logf("%d segments: %d pixels on segments, %d disoccluded, %d above their column's top, %d unfilled (count %d)", syn.UprightSegments, onSeg, hidden, lowered, unfilled, syn.UnfilledPixels)
			if len(model.Tops) == c.Width && lowered == 0 {
				t.Errorf("no pixel fetched from above a lowered column top: the case is not exercised")
			}
			if onSeg == 0 || syn.UnfilledPixels != unfilled {
				t.Errorf("unfilled count %d, per-pixel recount %d (%d on segments)", syn.UnfilledPixels, unfilled, onSeg)
			}
		})
	}
}

// TestColumnTops: in a band whose left half is a textured facade up to row
// 40 and whose right half is smooth sky down to the horizon (row 120)
// with textured ground below, each column's top is where its structure
// starts (within one half-resolution row, at or above it), never above
// the segment's TopRow.
func TestColumnTops(t *testing.T) {
	c := uprightCam()
	const fsx, fsy = 0.5, 0.5
	fw, fh := int(float64(c.Width)*fsx), int(float64(c.Height)*fsy)
	fb := gocv.NewMatWithSize(fh, fw, gocv.MatTypeCV8U)
	defer fb.Close()
	pb, err := fb.DataPtrUint8()
	if err != nil {
		t.Fatal(err)
	}
	const col0, col1, roof, horizon = 64, 96, 40, 120
	for y := 0; y < fh; y++ {
		for x := 0; x < fw; x++ {
			u, v := float64(x)/fsx, float64(y)/fsy
			g := 180 + y/8 // sky: a gentle gradient
			switch {
			case v >= horizon || (u < 80 && v >= roof):
				g = 60 + (x*37+y*91)%70 // grain of a facade or of the ground
			}
			pb[y*fw+x] = uint8(g)
		}
	}
	e := &UprightEstimator{fb: fb, fsx: fsx, fsy: fsy}
	model := UprightModel{Segments: []UprightSegment{{Col0: col0, Col1: col1, TopRow: 20, BaseRow0: 170, BaseRow1: 170}}}
	e.columnTops(c, &model)
	if len(model.Tops) != c.Width {
		t.Fatalf("%d tops, want %d", len(model.Tops), c.Width)
	}
	for u := col0; u < col1; u++ {
		want := float64(roof)
		if u >= 80 {
			want = horizon
		}
		if u == 78 || u == 79 || u == 80 || u == 81 {
			continue // the three-column window straddles the edge
		}
		if got := float64(model.Tops[u]); got > want || got < want-2/fsy-1 || got < 20 {
			t.Errorf("column %d: top %.1f, want within %.0f px above %.0f (and below the segment's top 20)", u, got, 2/fsy+1, want)
		}
	}
	if model.Tops[0] != -0.5 || model.Tops[c.Width-1] != -0.5 {
		t.Errorf("columns without a segment: tops %v and %v, want -0.5", model.Tops[0], model.Tops[c.Width-1])
	}
}
