package bench

import (
	"context"
	"fmt"
	"image"
	"image/color"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"testing"

	"gocv.io/x/gocv"

	"stopgap/bench/simdrive"
	"stopgap/internal/lossmodel"
	"stopgap/predictor"
)

// TestDiagMarks shows where the marks of things that moved miss and where
// they mark nothing, when MARKS_DIAG_OUT names a directory (skipped
// otherwise). It generates simdrive's street with traffic at 640x360
// (MARKS_DIAG_SEED, default 1) into the directory once (or takes the drive
// MARKS_DIAG_DRIVE names), replays it as stopgap replay does with its
// defaults but the Gilbert-Elliott loss at MARKS_DIAG_LOSS (default 0.1),
// 200 ms bursts and loss seed MARKS_DIAG_LOSS_SEED (default 1; the seed 1
// drive gives the figures of README, "Marks"), and for every PREDICTED
// tick up to MarkAgeLimitMs writes a PNG of the picture shown with the
// moving things' masks tinted (green where they truly are, blue where the
// picture shows them) and each mark's zone (red), last known place
// (yellow) and shown place (magenta) outlined, and one line per mark to
// marks.csv: its zone's area and how much of it truly changed, its last
// known place's and its shown place's. The log lists the marks that cost
// most precision (zone area not truly changed, summed over their gap's
// ticks), the share of the marked area in marks of which under 5 %
// truly changed, and the recall of where the things truly are and of where
// the picture shows them, apart, with the share of their pixels in road
// users (connected parts of the mask) that no mark touches, and the gaps
// (by held frame) whose truly changed pixels the marks miss most. -count=1 keeps go test from replaying a cached result.
//
//	MARKS_DIAG_OUT=/tmp/mdiag go test -count=1 ./bench -run TestDiagMarks -v
func TestDiagMarks(t *testing.T) {
	out := os.Getenv("MARKS_DIAG_OUT")
	if out == "" {
		t.Skip("set MARKS_DIAG_OUT to write the diagnosis of the marks")
	}
	envF := func(k string, def float64) float64 {
		if v, err := strconv.ParseFloat(os.Getenv(k), 64); err == nil {
			return v
		}
		return def
	}
	seed := int64(envF("MARKS_DIAG_SEED", 1))
	if err := os.MkdirAll(out, 0o755); err != nil {
		t.Fatal(err)
	}
	drive := os.Getenv("MARKS_DIAG_DRIVE")
	if drive == "" {
		drive = filepath.Join(out, fmt.Sprintf("drive-seed%d", seed))
	}
	if _, err := os.Stat(filepath.Join(drive, "frames.csv")); err != nil {
		cfg := simdrive.Config{Width: 640, Height: 360, Traffic: true, Seed: seed}
		if err := simdrive.Generate(context.Background(), cfg, drive, nil); err != nil {
			t.Fatal(err)
		}
	}
	csvf, err := os.Create(filepath.Join(out, "marks.csv"))
	if err != nil {
		t.Fatal(err)
	}
	defer csvf.Close()
	fmt.Fprintln(csvf, "held,tick,age_ms,mark,zone_px,zone_changed_px,box_px,box_changed_px,shown_px,shown_changed_px")
	type key struct{ held, mark int }
	type cost struct{ area, changed int }
	costs := map[key]*cost{}
	var marked, hit int
	missed := map[int]int{}    // truly changed pixels no mark holds, per held frame
	var partPx, partHit [2]int // where the things are, where they are shown
	var partUnmarked [2]int    // of them in road users no mark touches
	inZero := 0

	rc := diagMarksReplay(drive, filepath.Join(out, "replay"), envF("MARKS_DIAG_LOSS", 0.1), uint64(envF("MARKS_DIAG_LOSS_SEED", 1)))
	shownMask, img, tint := gocv.NewMat(), gocv.NewMat(), gocv.NewMat()
	defer shownMask.Close()
	defer img.Close()
	defer tint.Close()
	rc.marked = func(d markedTick) error {
		if d.AgeMs > MarkAgeLimitMs {
			return nil
		}
		w, h := d.Changed.Cols(), d.Changed.Rows()
		gocv.CvtColor(d.ShownMask, &shownMask, gocv.ColorBGRToGray)
		gocv.Threshold(shownMask, &shownMask, predictor.NeutralGrey, 255, gocv.ThresholdBinary)
		count := func(m gocv.Mat, r image.Rectangle) int {
			r = r.Intersect(image.Rect(0, 0, w, h))
			if r.Empty() {
				return 0
			}
			roi := m.Region(r)
			defer roi.Close()
			return gocv.CountNonZero(roi)
		}
		for i, mv := range d.Marks {
			z, b, s := mv.Zone(d.AgeMs).Intersect(d.Inner), mv.Box.Intersect(d.Inner), mv.Shown.Intersect(d.Inner)
			za, zc := z.Dx()*z.Dy(), count(d.Changed, z)
			fmt.Fprintf(csvf, "%d,%d,%.0f,%d,%d,%d,%d,%d,%d,%d\n", d.Held, d.K, d.AgeMs, i, za, zc,
				b.Dx()*b.Dy(), count(d.Changed, b), s.Dx()*s.Dy(), count(d.Changed, s))
			c := costs[key{d.Held, i}]
			if c == nil {
				c = &cost{}
				costs[key{d.Held, i}] = c
			}
			c.area += za
			c.changed += zc
		}
		// Recall of where the things truly are and of where the
		// picture shows them, apart (inside the label's border).
		for k, m := range []gocv.Mat{d.Target, shownMask} {
			part, both := gocv.NewMat(), gocv.NewMat()
			gocv.BitwiseAnd(m, d.Changed, &part)
			gocv.BitwiseAnd(part, d.Marked, &both)
			partPx[k] += gocv.CountNonZero(part)
			partHit[k] += gocv.CountNonZero(both)
			// Road users no mark touches at all (the detection missed
			// them), as against the parts of marked ones left out.
			labels, stats, cents := gocv.NewMat(), gocv.NewMat(), gocv.NewMat()
			n := gocv.ConnectedComponentsWithStats(part, &labels, &stats, &cents)
			hitIn := make([]bool, n)
			for y := 0; y < h; y++ {
				for x := 0; x < w; x++ {
					if l := labels.GetIntAt(y, x); l > 0 && d.Marked.GetUCharAt(y, x) != 0 {
						hitIn[l] = true
					}
				}
			}
			for i := 1; i < n; i++ {
				if !hitIn[i] {
					partUnmarked[k] += int(stats.GetIntAt(i, int(gocv.CC_STAT_AREA)))
				}
			}
			labels.Close()
			stats.Close()
			cents.Close()
			part.Close()
			both.Close()
		}
		and := gocv.NewMat()
		gocv.BitwiseAnd(d.Changed, d.Marked, &and)
		marked += gocv.CountNonZero(d.Marked)
		hit += gocv.CountNonZero(and)
		missed[d.Held] += gocv.CountNonZero(d.Changed) - gocv.CountNonZero(and)
		and.Close()

		d.Shown.CopyTo(&img)
		d.Shown.CopyTo(&tint)
		green := gocv.NewMatWithSizeFromScalar(gocv.NewScalar(0, 255, 0, 0), h, w, gocv.MatTypeCV8UC3)
		green.CopyToWithMask(&tint, d.Target)
		green.SetTo(gocv.NewScalar(255, 0, 0, 0))
		green.CopyToWithMask(&tint, shownMask)
		green.Close()
		gocv.AddWeighted(img, 0.5, tint, 0.5, 0, &img)
		for _, mv := range d.Marks {
			gocv.Rectangle(&img, mv.Zone(d.AgeMs), color.RGBA{R: 255}, 1)
			gocv.Rectangle(&img, mv.Box, color.RGBA{R: 255, G: 255}, 1)
			gocv.Rectangle(&img, mv.Shown, color.RGBA{R: 255, B: 255}, 1)
		}
		if !gocv.IMWrite(filepath.Join(out, fmt.Sprintf("tick_%04d_held_%04d.png", d.K, d.Held)), img) {
			return fmt.Errorf("writing tick %d's picture failed", d.K)
		}
		return nil
	}
	if _, err := Replay(context.Background(), rc); err != nil {
		t.Fatal(err)
	}
	keys := make([]key, 0, len(costs))
	for k, c := range costs {
		keys = append(keys, k)
		if c.changed < c.area/20 {
			inZero += c.area
		}
	}
	sort.Slice(keys, func(i, j int) bool {
		ci, cj := costs[keys[i]], costs[keys[j]]
		return ci.area-ci.changed > cj.area-cj.changed
	})
	if marked == 0 {
		t.Fatal("no tick was marked")
	}
	zoneSum := 0
	for _, c := range costs {
		zoneSum += c.area
	}
	t.Logf("marked %d px, %d truly changed (precision %.3f); %.2f of the zones' area in marks of which under 5 %% truly changed",
		marked, hit, float64(hit)/float64(marked), float64(inZero)/float64(max(1, zoneSum)))
	for k, name := range []string{"where the things are", "where the picture shows them"} {
		t.Logf("%s: %d px, recall %.3f; %.3f of the pixels in road users no mark touches", name, partPx[k],
			float64(partHit[k])/float64(max(1, partPx[k])), float64(partUnmarked[k])/float64(max(1, partPx[k])))
	}
	for _, k := range keys[:min(10, len(keys))] {
		c := costs[k]
		t.Logf("held %4d mark %d: zone %7d px over its ticks, %6d truly changed (%.2f)", k.held, k.mark, c.area, c.changed,
			float64(c.changed)/float64(max(1, c.area)))
	}
	// The gaps whose truly changed pixels the marks miss most.
	helds, missSum := make([]int, 0, len(missed)), 0
	for j, n := range missed {
		helds = append(helds, j)
		missSum += n
	}
	sort.Slice(helds, func(a, b int) bool { return missed[helds[a]] > missed[helds[b]] })
	for _, j := range helds[:min(8, len(helds))] {
		t.Logf("held %4d: %6d truly changed px missed over its ticks (%.2f of all missed)", j, missed[j],
			float64(missed[j])/float64(max(1, missSum)))
	}
}

// diagMarksReplay is the replay of drive into out that the diagnoses of
// the marks run: as stopgap replay with its defaults (its zero confidence
// model and allowance are the command's defaults already), but
// Gilbert-Elliott loss at lossRate with 200 ms bursts and seed lossSeed,
// and no example frames.
func diagMarksReplay(drive, out string, lossRate float64, lossSeed uint64) ReplayConfig {
	rc := baseReplay(drive, out)
	rc.Overwrite = true
	rc.Loss = lossmodel.Config{Model: lossmodel.GilbertElliott, LossRate: lossRate, BurstMs: 200, Seed: lossSeed}
	rc.Telemetry.Seed = rc.Loss.Seed
	rc.Examples = -1
	return rc
}
