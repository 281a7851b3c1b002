package simdrive

import (
	"bytes"
	"context"
	"math"
	"os"
	"path/filepath"
	"testing"

	"gocv.io/x/gocv"

	"stopgap/stream/recording"
)

// TestSceneRendersTheDriveFrames: the frames Scene renders are the ones
// Generate wrote (the same JPEG bytes once encoded alike), and with traffic
// the road users' pixels of the geometry are exactly the mover masks.
func TestSceneRendersTheDriveFrames(t *testing.T) {
	cfg := small
	cfg.Traffic = true
	out := filepath.Join(t.TempDir(), "drive")
	if err := Generate(context.Background(), cfg, out, nil); err != nil {
		t.Fatal(err)
	}
	rec, err := recording.Open(out)
	if err != nil {
		t.Fatal(err)
	}
	sc, err := NewScene(cfg)
	if err != nil {
		t.Fatal(err)
	}
	defer sc.Close()
	if sc.Frames() != len(rec.Frames) {
		t.Fatalf("scene has %d frames, the drive %d", sc.Frames(), len(rec.Frames))
	}
	frame := gocv.NewMat()
	defer frame.Close()
	var g Geometry
	for _, i := range []int{0, 29, 59} {
		if err := sc.Render(i, &frame, &g); err != nil {
			t.Fatal(err)
		}
		buf, err := gocv.IMEncodeWithParams(gocv.JPEGFileExt, frame, []int{gocv.IMWriteJpegQuality, DefaultJPEGQuality})
		if err != nil {
			t.Fatal(err)
		}
		path, err := rec.FramePath(i)
		if err != nil {
			t.Fatal(err)
		}
		want, err := os.ReadFile(path)
		if err != nil {
			t.Fatal(err)
		}
		if !bytes.Equal(buf.GetBytes(), want) {
			t.Errorf("frame %d: the scene's render differs from the drive's", i)
		}
		buf.Close()
		mask := gocv.IMRead(MoverMaskPath(out, i), gocv.IMReadGrayScale)
		mb, _ := mask.DataPtrUint8()
		bad, users := 0, 0
		classes := map[Class]int{}
		for p, id := range g.Surface {
			classes[sc.Class(id)]++
			if (id == SurfaceRoadUser) != (mb[p] != 0) {
				bad++
			}
			if mb[p] != 0 {
				users++
			}
		}
		mask.Close()
		if bad != 0 || classes[ClassNone] != 0 {
			t.Errorf("frame %d: %d pixels where the geometry and the mover mask (%d px) disagree, %d drawn by nothing", i, bad, users, classes[ClassNone])
		}
		if classes[ClassSky] == 0 || classes[ClassGround] == 0 || classes[ClassFacade]+classes[ClassPost] == 0 {
			t.Errorf("frame %d: classes %v, want sky, ground and upright structure", i, classes)
		}
	}
}

// TestSeenFollowsTheScene: every pixel of a frame is seen in the frame
// itself at its own place; between frames 6 apart (200 ms), the raw colour
// at the followed place of each seen pixel matches the pixel (the geometry
// is the renderer's: mean |difference| 5.28 grey levels, the resampling
// of the two renders; 6.05 with every depth 2 % too far, 9.85 with 10 %),
// and does not where the point was hidden.
func TestSeenFollowsTheScene(t *testing.T) {
	sc, err := NewScene(small)
	if err != nil {
		t.Fatal(err)
	}
	defer sc.Close()
	a, b := gocv.NewMat(), gocv.NewMat()
	defer a.Close()
	defer b.Close()
	var ga, gb Geometry
	if err := sc.Render(20, &a, &ga); err != nil {
		t.Fatal(err)
	}
	if err := sc.Render(26, &b, &gb); err != nil {
		t.Fatal(err)
	}
	w, h := small.Width, small.Height
	vis := make([]Visibility, w*h)
	if err := sc.Seen(vis, nil, &ga, &ga); err != nil {
		t.Fatal(err)
	}
	for i, v := range vis {
		if v != Seen {
			t.Fatalf("pixel (%d, %d) of a frame is %v in itself, want seen", i%w, i/w, v)
		}
	}
	// Frame 26 followed into frame 20: mean absolute difference of the
	// grey level, bilinear at the followed place, per visibility.
	ag, bg := gocv.NewMat(), gocv.NewMat()
	defer ag.Close()
	defer bg.Close()
	gocv.CvtColor(a, &ag, gocv.ColorBGRToGray)
	gocv.CvtColor(b, &bg, gocv.ColorBGRToGray)
	ap, _ := ag.DataPtrUint8()
	bp, _ := bg.DataPtrUint8()
	f := sc.newFollower(&gb, &ga)
	sum := map[Visibility]float64{}
	n := map[Visibility]int{}
	for v := 1; v < h-1; v++ {
		for u := 1; u < w-1; u++ {
			x, y, vis := f.follow(u, v)
			if vis == Seen && (x < 0 || y < 0 || x > float64(w-2) || y > float64(h-2)) {
				continue
			}
			n[vis]++
			if vis != Seen && vis != Hidden {
				continue
			}
			x0, y0 := int(math.Floor(x)), int(math.Floor(y))
			fx, fy := x-float64(x0), y-float64(y0)
			at := func(xx, yy int) float64 { return float64(ap[yy*w+xx]) }
			s := (1-fy)*((1-fx)*at(x0, y0)+fx*at(x0+1, y0)) + fy*((1-fx)*at(x0, y0+1)+fx*at(x0+1, y0+1))
			sum[vis] += math.Abs(s - float64(bp[v*w+u]))
		}
	}
	seen, hidden := sum[Seen]/float64(n[Seen]), sum[Hidden]/float64(max(1, n[Hidden]))
	t.Logf("pixels %v; mean |diff| seen %.2f, hidden %.2f grey levels", n, seen, hidden)
	if n[Seen] < w*h/2 || n[Hidden] == 0 || !(seen < 5.6) || !(hidden > 2*seen) {
		t.Errorf("seen %d px with mean |diff| %.2f, hidden %d px with %.2f: want most pixels seen and matching (< 5.6), hidden ones at least twice as different",
			n[Seen], seen, n[Hidden], hidden)
	}
}
