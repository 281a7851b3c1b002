package bench

import (
	"context"
	"fmt"
	"image"
	"math"
	"path/filepath"
	"sort"
	"strings"
	"testing"

	"gocv.io/x/gocv"

	"stopgap/bench/simdrive"
	"stopgap/predictor"
	"stopgap/stream/recording"
)

// TestDiagBudget explains where the error budget's model error sits when
// BUDGET_DIAG_OUT names a directory (skipped otherwise). It replays the
// default drive (BUDGET_DIAG_SETBACK sets simdrive's FacadeSetbackM) with
// --loss-rate 0.1 --burst-ms 200 --seed 1 and the exact motion, as
// BenchmarkErrorBudget does, and splits each seen region's excess error
// (the predicted frame's squared luma error minus that of the warp with
// the exact geometry, ErrorBudget's ExactWarpMSE) by where the pixel is:
// shown in NeutralGrey, in the horizon blend band, at the foot or top of
// upright structure (another class within 12 px in its column), at the
// image edges, by row; the pixels the held frame does not see by whether
// they are shown grey. Every BUDGET_DIAG_STEP-th PREDICTED tick (default
// 40) it writes three PNGs: truth, prediction and the error (red where the
// prediction is worse than the exact warp, green where better) over a tint
// of the class (road blue, posts green, facades teal, sky grey, not seen
// full blue). The drive is generated into the directory once and reused;
// -count=1 keeps go test from replaying a cached result.
//
//	BUDGET_DIAG_OUT=/tmp/bdiag go test -count=1 ./bench -run TestDiagBudget -v
func TestDiagBudget(t *testing.T) {
	out, step, rec, sc := diagDrive(t, "BUDGET_DIAG", 40, "error-budget diagnosis")
	a := newBudgetAcc(sc)
	defer a.Close()
	cam := rec.Camera
	w, h := cam.Width, cam.Height
	hz := cam.Horizon()
	type cat struct{ n, pred, exact float64 }
	cats := map[string]*cat{}
	var total float64
	addCat := func(name string, p, e float64) {
		c := cats[name]
		if c == nil {
			c = &cat{}
			cats[name] = c
		}
		c.n++
		c.pred += p
		c.exact += e
	}
	cls := make([]simdrive.Class, w*h)
	tick := 0
	rc := ReplayConfig{Drive: rec.Dir, Policy: predictor.DefaultPolicy()}
	rc.Loss = baseReplay(rec.Dir, "").Loss
	rc.truthMotion = func(tr []recording.Truth) predictor.MotionSource { return exactMotion(tr) }
	rc.Examples = -1
	rc.predicted = func(k, held int, pred, truth, heldImg gocv.Mat) error {
		if err := a.add(k, held, pred, truth, heldImg); err != nil {
			return err
		}
		tick++
		pb, _ := pred.DataPtrUint8()
		for i := range cls {
			cls[i] = sc.Class(a.gTruth.Surface[i])
		}
		// near returns the class met first within 12 px up (dir -1) or
		// down (+1) of pixel i in its column, other than its own.
		near := func(i, dir int) simdrive.Class {
			u, v := i%w, i/w
			for d := 1; d <= 12; d++ {
				vv := v + dir*d
				if vv < 0 || vv >= h {
					return simdrive.ClassNone
				}
				if c := cls[vv*w+u]; c != cls[i] {
					return c
				}
			}
			return simdrive.ClassNone
		}
		var img gocv.Mat
		draw := tick%step == 0
		var ib []byte
		if draw {
			img = gocv.NewMatWithSize(h, 3*w, gocv.MatTypeCV8UC3)
			defer img.Close()
			ib, _ = img.DataPtrUint8()
			tb, _ := truth.DataPtrUint8()
			for v := 0; v < h; v++ {
				copy(ib[v*9*w:v*9*w+3*w], tb[v*3*w:(v+1)*3*w])
			}
		}
		for i := 0; i < w*h; i++ {
			u, v := i%w, i/w
			dp := float64(a.lp[i] - a.lt[i])
			p := dp * dp
			total += p
			var e float64
			region := budgetRegions[a.regionOf(a.gTruth.Surface[i], a.vis[i])]
			short := strings.Fields(region)[0]
			if a.vis[i] == simdrive.Seen {
				de := bilinear(a.lh, w, h, float64(a.xy[2*i]), float64(a.xy[2*i+1])) - float64(a.lt[i])
				e = de * de
			}
			grey := pb[3*i] == 128 && pb[3*i+1] == 128 && pb[3*i+2] == 128
			hr, _ := hz.RowAt(float64(u))
			var where string
			switch {
			case a.vis[i] != simdrive.Seen && grey:
				where = "grey"
			case a.vis[i] != simdrive.Seen:
				where = "not grey"
			case grey:
				where = "grey"
			case math.Abs(float64(v)-hr) <= float64(predictor.DefaultBandPx)/2:
				where = "horizon band"
			case near(i, -1) != simdrive.ClassNone:
				where = "below " + near(i, -1).String()
			case near(i, +1) != simdrive.ClassNone:
				where = "above " + near(i, +1).String()
			case u < 16 || u >= w-16 || v >= h-16:
				where = "image edge"
			default:
				where = fmt.Sprintf("rows %3d-%3d", v/90*90, v/90*90+89)
			}
			addCat(short+" | "+where, p, e)
			addCat(short+" | (all)", p, e)
			if draw {
				j := 3*w + v*9*w + 3*u
				copy(ib[j:j+3], pb[3*i:3*i+3])
				// Error panel: red where worse than the exact warp.
				ex := math.Sqrt(math.Max(0, p-e))
				be := math.Sqrt(math.Max(0, e-p))
				j += 3 * w
				ib[j], ib[j+1], ib[j+2] = 0, byte(math.Min(255, 4*be)), byte(math.Min(255, 4*ex))
				if a.vis[i] != simdrive.Seen {
					ib[j] = 255
				}
				// Class tint on a dark base.
				switch cls[i] {
				case simdrive.ClassGround:
					ib[j] = max(ib[j], 60)
				case simdrive.ClassFacade:
					ib[j+1] = max(ib[j+1], 50)
					ib[j] = max(ib[j], 50)
				case simdrive.ClassPost:
					ib[j+1] = max(ib[j+1], 80)
				case simdrive.ClassSky:
					ib[j], ib[j+1], ib[j+2] = max(ib[j], 30), max(ib[j+1], 30), max(ib[j+2], 30)
				}
			}
		}
		if draw {
			for p, name := range []string{"truth", "pred", "err"} {
				r := img.Region(image.Rect(p*w, 0, (p+1)*w, h))
				gocv.IMWrite(filepath.Join(out, fmt.Sprintf("tick%05d_held%05d_%s.png", k, held, name)), r)
				r.Close()
			}
		}
		return nil
	}
	var o replayOutput
	if _, err := replayDrive(context.Background(), rc, &o); err != nil {
		t.Fatal(err)
	}
	closeExamples(o.examples)
	var b strings.Builder
	WriteBudget(&b, a.budget())
	t.Logf("\n%s", b.String())
	names := make([]string, 0, len(cats))
	for k := range cats {
		names = append(names, k)
	}
	sort.Strings(names)
	var s strings.Builder
	fmt.Fprintf(&s, "%-34s %8s %9s %9s %9s %9s\n", "region | where", "pixels%", "of error", "excess", "pred MSE", "exact MSE")
	for _, k := range names {
		c := cats[k]
		fmt.Fprintf(&s, "%-34s %7.2f%% %8.2f%% %8.2f%% %9.1f %9.1f\n", k, 100*c.n/a.pixels, 100*c.pred/total, 100*(c.pred-c.exact)/total, c.pred/c.n, c.exact/c.n)
	}
	t.Logf("%d ticks\n%s", tick, s.String())
}
