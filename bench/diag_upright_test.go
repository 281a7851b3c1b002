package bench

import (
	"context"
	"fmt"
	"image"
	"image/color"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"testing"

	"gocv.io/x/gocv"

	"stopgap/bench/simdrive"
	"stopgap/predictor"
	"stopgap/stream/recording"
)

// TestDiagUpright explains the facade error of predicted frames on the
// default drive when UPRIGHT_DIAG_OUT names a directory (skipped
// otherwise): for held frames every UPRIGHT_DIAG_STEP frames (default 15)
// and a gap of 6 frames (200 ms) with the exact motion, it follows each
// true facade pixel the held frame sees back to the held frame, asks which
// part of the model moved it (an upright segment, the far plane above the
// horizon, the road below it) and how far from its true place, and writes
// a table and a few images (held frame with its segments and their plane
// distances | truth | prediction | error, red where displaced more than
// 4 px; and the prediction's top half). The upright structure is
// estimated against the frame UPRIGHT_DIAG_BACK frames before the held
// one (default 1; the Filler compares with the one up to 200 ms, 6 frames,
// before); UPRIGHT_DIAG_SETBACK sets simdrive's FacadeSetbackM. The drive
// is generated into the directory once and reused.
//
//	UPRIGHT_DIAG_OUT=/tmp/diag UPRIGHT_DIAG_BACK=6 go test ./bench -run TestDiagUpright -v
func TestDiagUpright(t *testing.T) {
	out, step, rec, sc := diagDrive(t, "UPRIGHT_DIAG", 15, "upright-model diagnosis")
	cam := rec.Camera
	w, h := cam.Width, cam.Height
	ex := exactMotion(rec.Truth)
	up, _ := predictor.NewUprightEstimator(predictor.UprightOptions{})
	defer up.Close()
	fd, _ := predictor.NewFarDepthEstimator(predictor.FarDepthOptions{})
	defer fd.Close()
	syn, err := predictor.NewSynthesizer(cam, predictor.SynthOptions{})
	if err != nil {
		t.Fatal(err)
	}
	defer syn.Close()
	read := func(i int) gocv.Mat {
		p, err := rec.FramePath(i)
		if err != nil {
			t.Fatal(err)
		}
		return gocv.IMRead(p, gocv.IMReadColor)
	}
	type cat struct {
		n, sse, disp float64
		hist         [6]float64 // displacement < 1, 2, 4, 8, 16, more px
	}
	cats := map[string]*cat{}
	add := func(name string, e2, d float64) {
		c := cats[name]
		if c == nil {
			c = &cat{}
			cats[name] = c
		}
		c.n++
		c.sse += e2
		c.disp += d
		k := 0
		for _, lim := range []float64{1, 2, 4, 8, 16} {
			if d < lim {
				break
			}
			k++
		}
		c.hist[k]++
	}
	var gHeld, gTruth simdrive.Geometry
	raw := gocv.NewMat()
	defer raw.Close()
	vis := make([]simdrive.Visibility, w*h)
	xy := make([]float32, 2*w*h)
	pred := gocv.NewMat()
	defer pred.Close()
	var model predictor.UprightModel
	const gap = 6
	back := 1
	if v, err := strconv.Atoi(os.Getenv("UPRIGHT_DIAG_BACK")); err == nil && v > 0 {
		back = v
	}
	rv := cam.RotationVehicleToCamera()
	ctr := cam.CentreVehicle()
	for held := 30; held+gap < len(rec.Frames); held += step {
		prev, last, truth := read(held-back), read(held), read(held+gap)
		m01, _ := ex.Relative(rec.Frames[held-back].CaptureUs, rec.Frames[held].CaptureUs)
		m, _ := ex.Relative(rec.Frames[held].CaptureUs, rec.Frames[held+gap].CaptureUs)
		p1 := read(held - 1)
		m1, _ := ex.Relative(rec.Frames[held-1].CaptureUs, rec.Frames[held].CaptureUs)
		far, err := fd.Estimate(p1, last, cam, m1)
		p1.Close()
		if err != nil {
			far = math.Inf(1)
		}
		if err := up.Estimate(prev, last, cam, m01, far, &model); err != nil {
			t.Fatal(err)
		}
		if _, err := syn.SynthesizeScene(last, m, far, &model, &pred); err != nil {
			t.Fatal(err)
		}
		if err := sc.Render(held, &raw, &gHeld); err != nil {
			t.Fatal(err)
		}
		if err := sc.Render(held+gap, &raw, &gTruth); err != nil {
			t.Fatal(err)
		}
		if err := sc.Seen(vis, xy, &gTruth, &gHeld); err != nil {
			t.Fatal(err)
		}
		lp, _ := luma(nil, pred)
		lt, _ := luma(nil, truth)
		g := predictor.GroundHomographyPlanar(cam, m.DxM, m.DyM, m.DyawRad)
		f := predictor.FarHomographyPlanar(cam, m.DxM, m.DyM, m.DyawRad, far)
		hz := cam.Horizon()
		segOf := make([]int, w) // held column -> segment index or -1
		for i := range segOf {
			segOf[i] = -1
		}
		hs := make([]predictor.Homography, len(model.Segments))
		for k, s := range model.Segments {
			for u := s.Col0; u < s.Col1; u++ {
				segOf[u] = k
			}
			hs[k] = predictor.PlaneHomography(cam, m.DxM, m.DyM, m.DyawRad, s.Plane)
		}
		errImg := gocv.NewMatWithSize(h, w, gocv.MatTypeCV8UC3)
		eb, _ := errImg.DataPtrUint8()
		for i := 0; i < w*h; i++ {
			if vis[i] != simdrive.Seen {
				continue
			}
			id := gTruth.Surface[i]
			if cl := sc.Class(id); cl != simdrive.ClassFacade {
				dd := float64(lp[i] - lt[i])
				add("other "+cl.String(), dd*dd, 0)
				continue
			}
			x, y := float64(xy[2*i]), float64(xy[2*i+1])
			u, v := float64(i%w), float64(i/w)
			d := float64(lp[i] - lt[i])
			col := min(w-1, max(0, int(math.Round(x))))
			var hm predictor.Homography
			var name string
			hzRow, _ := hz.RowAt(x)
			k := segOf[col]
			inSeg := false
			if k >= 0 {
				s := model.Segments[k]
				fr := (x - (float64(s.Col0) - 0.5)) / float64(s.Col1-s.Col0)
				base := s.BaseRow0 + fr*(s.BaseRow1-s.BaseRow0)
				inSeg = y >= s.TopRow && y <= base
			}
			switch {
			case inSeg:
				hm = hs[k]
				// Compare with the true plane, in the held camera.
				n, off, _ := sc.VehiclePlane(held, gHeld.Surface[min(h-1, max(0, int(math.Round(y))))*w+col])
				nv := [3]float64{n[0], n[1], 0}
				var nc [3]float64
				for a := 0; a < 3; a++ {
					for b := 0; b < 3; b++ {
						nc[a] += rv[a][b] * nv[b]
					}
				}
				dist := off - (nv[0]*ctr[0] + nv[1]*ctr[1])
				sp := model.Segments[k].Plane
				cosang := nc[0]*sp.Normal[0] + nc[1]*sp.Normal[1] + nc[2]*sp.Normal[2]
				if cosang < 0 {
					cosang, dist = -cosang, -dist
				}
				ang := math.Acos(math.Min(1, cosang)) * 180 / math.Pi
				switch {
				case ang > 30:
					name = "segment, wrong orientation"
				case math.Abs(sp.DistM/dist-1) < 0.05 && ang < 5:
					name = "segment, plane within 5%/5deg"
				case ang >= 5:
					name = "segment, angle 5-30deg"
				default:
					name = "segment, distance off >5%"
				}
			case k >= 0 && y < model.Segments[k].TopRow:
				hm, name = f, "segment band, above its top (far)"
			case y < hzRow:
				hm, name = f, "no segment, above horizon (far)"
			default:
				hm, name = g, "no segment, below horizon (road)"
			}
			if !inSeg {
				// The true plane: angle of its normal to the vehicle's y axis
				// (0: a wall along travel, 90: a front) and depth.
				n, off, _ := sc.VehiclePlane(held, gHeld.Surface[min(h-1, max(0, int(math.Round(y))))*w+col])
				ang := math.Acos(math.Min(1, math.Abs(n[1]))) * 180 / math.Pi
				ab := fmt.Sprintf("  true angle %02.0f-", 15*math.Floor(ang/15))
				add(name+ab, d*d, 0)
				dist := math.Abs(off - (n[0]*ctr[0] + n[1]*ctr[1]))
				db := "  plane dist <10"
				for _, lim := range []float64{10, 15, 20, 30, 45, 70} {
					if dist >= lim {
						db = fmt.Sprintf("  plane dist >=%02.0f", lim)
					}
				}
				add(name+db, d*d, 0)
			}
			px, py, ok := hm.Apply(x, y)
			disp := 1e3
			if ok {
				disp = math.Hypot(px-u, py-v)
			}
			add(name, d*d, disp)
			add("all facade", d*d, disp)
			e := min(255, math.Abs(d)*3)
			eb[3*i], eb[3*i+1], eb[3*i+2] = uint8(e), uint8(e), uint8(e)
			if disp > 4 {
				eb[3*i+2] = 255
			}
		}
		if (held/step)%4 == 2 {
			// Truth | prediction | error (red: displaced > 4 px), bands of
			// the held frame's segments drawn on the prediction where they
			// map (outline of each segment quad in the held frame, on the
			// held frame itself for reference).
			hl := last.Clone()
			for _, s := range model.Segments {
				pts := [][2]float64{{float64(s.Col0), s.TopRow}, {float64(s.Col1), s.TopRow}, {float64(s.Col1), s.BaseRow1}, {float64(s.Col0), s.BaseRow0}}
				for a := 0; a < 4; a++ {
					p, q := pts[a], pts[(a+1)%4]
					gocv.Line(&hl, image.Pt(int(p[0]), int(p[1])), image.Pt(int(q[0]), int(q[1])), color.RGBA{G: 255}, 1)
				}
				gocv.PutText(&hl, fmt.Sprintf("%.0f", s.Plane.DistM), image.Pt(s.Col0+2, int(math.Max(12, s.TopRow+12))), gocv.FontHersheyPlain, 0.8, color.RGBA{R: 255, G: 255}, 1)
			}
			pt := pred.Region(image.Rect(0, 0, w, h/2))
			gocv.IMWrite(filepath.Join(out, fmt.Sprintf("predtop%04d.png", held)), pt)
			pt.Close()
			grid := gocv.NewMatWithSize(2*h, 2*w, gocv.MatTypeCV8UC3)
			for q, im := range []gocv.Mat{hl, truth, pred, errImg} {
				r := grid.Region(image.Rect((q%2)*w, (q/2)*h, (q%2+1)*w, (q/2+1)*h))
				im.CopyTo(&r)
				r.Close()
			}
			gocv.IMWrite(filepath.Join(out, fmt.Sprintf("diag%04d.png", held)), grid)
			grid.Close()
			hl.Close()
		}
		errImg.Close()
		prev.Close()
		last.Close()
		truth.Close()
	}
	names := make([]string, 0, len(cats))
	for k := range cats {
		names = append(names, k)
	}
	sort.Strings(names)
	tot := cats["all facade"]
	for _, k := range []string{"all facade", "no segment, above horizon (far)", "no segment, below horizon (road)", "segment band, above its top (far)", "segment, angle 5-30deg", "segment, distance off >5%", "segment, plane within 5%/5deg", "segment, wrong orientation", "other sky", "other ground", "other post"} {
		if c := cats[k]; c != nil {
			t.Logf("SUMMARY %-36s %7.1f%% %7.1f%% %8.1f %8.2f", k, 100*c.n/tot.n, 100*c.sse/tot.sse, c.sse/c.n, c.disp/c.n)
		}
	}
	t.Logf("%-36s %8s %8s %8s %8s   %s", "facade pixels by model part", "px %", "err %", "MSE", "disp px", "disp <1 <2 <4 <8 <16 more (%)")
	for _, k := range names {
		c := cats[k]
		hs := ""
		for _, v := range c.hist {
			hs += fmt.Sprintf(" %5.1f", 100*v/c.n)
		}
		t.Logf("%-36s %7.1f%% %7.1f%% %8.1f %8.2f  %s", k, 100*c.n/tot.n, 100*c.sse/tot.sse, c.sse/c.n, c.disp/c.n, hs)
	}
}

// diagDrive prepares an opt-in diagnosis: it skips t unless PREFIX_OUT names
// a directory, reads the tick step PREFIX_STEP (default defStep) and
// simdrive's FacadeSetbackM from PREFIX_SETBACK, generates the default drive
// into PREFIX_OUT/drive once (it is reused after) and returns the directory,
// the step, the recording and the drive's scene (closed when t ends).
func diagDrive(t *testing.T, prefix string, defStep int, what string) (out string, step int, rec *recording.Recording, sc *simdrive.Scene) {
	t.Helper()
	out = os.Getenv(prefix + "_OUT")
	if out == "" {
		t.Skipf("set %s_OUT to write the %s", prefix, what)
	}
	step = defStep
	if v, err := strconv.Atoi(os.Getenv(prefix + "_STEP")); err == nil && v > 0 {
		step = v
	}
	cfg := simdrive.Config{}
	if v, err := strconv.ParseFloat(os.Getenv(prefix+"_SETBACK"), 64); err == nil {
		cfg.FacadeSetbackM = v
	}
	drive := filepath.Join(out, "drive")
	if _, err := os.Stat(filepath.Join(drive, "frames.csv")); err != nil {
		if err := simdrive.Generate(context.Background(), cfg, drive, nil); err != nil {
			t.Fatal(err)
		}
	}
	rec, err := recording.Open(drive)
	if err != nil {
		t.Fatal(err)
	}
	sc, err = simdrive.NewScene(cfg)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { sc.Close() })
	return out, step, rec, sc
}
