package bench

import (
	"context"
	"fmt"
	"image"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"gocv.io/x/gocv"

	"stopgap/bench/simdrive"
	"stopgap/predictor"
)

// ceilingRule is one way of marking a tick in TestDiagMarksCeiling: which
// boxes the marks start from and which parts of Mover.Zone they keep.
type ceilingRule struct {
	name string
	// trueBoxes: each mover's held box replaced by the bounding box of the
	// road users (connected parts of the held frame's exact mask) it
	// touches; dropFalse: movers touching none are left out.
	trueBoxes, dropFalse bool
	// The parts of the zone kept: the growth, the box moved by velocity ·
	// age, the shown place. All three is Mover.Zone.
	grow, move, shown bool
	// perfect: no marks at all but the bounding box of every connected
	// part of the truly changed pixels (the best any rectangles can do).
	perfect bool
}

var ceilingRules = []ceilingRule{
	{name: "as shipped", grow: true, move: true, shown: true},
	{name: "true boxes", trueBoxes: true, grow: true, move: true, shown: true},
	{name: "true boxes, no false marks", trueBoxes: true, dropFalse: true, grow: true, move: true, shown: true},
	{name: "  and no growth", trueBoxes: true, dropFalse: true, move: true, shown: true},
	{name: "  and no growth, no shown place", trueBoxes: true, dropFalse: true, move: true},
	{name: "  the placed box alone", trueBoxes: true, dropFalse: true},
	{name: "a box around each changed part", perfect: true},
}

// ceilingZone is Mover.Zone with its parts chosen by r ("as shipped" keeps
// them all; the test checks that it scores as the replay does).
func ceilingZone(mv predictor.Mover, ageMs float64, r ceilingRule) image.Rectangle {
	a := ageMs / 1000
	dx, dy := mv.VxPxPerS*a, mv.VyPxPerS*a
	z := mv.Box
	if r.move {
		z = z.Union(mv.Box.Add(image.Pt(int(math.Round(dx)), int(math.Round(dy)))))
	}
	if r.grow {
		z = z.Inset(-int(math.Ceil(0.25 * math.Max(math.Hypot(dx, dy), predictor.DefaultMoverMinSpeedPxPerS*a))))
	}
	if r.shown {
		z = z.Union(mv.Shown)
	}
	return z
}

// TestDiagMarksCeiling says how far marks of today's design could go if
// the detection were perfect, when MARKS_CEILING is set (skipped
// otherwise). It replays simdrive's street with traffic at 640x360, seeds
// 1 to 4 (generated into a temporary directory, or the comma-separated
// drive directories MARKS_CEILING_DRIVES names), as TestDiagMarks does at
// its default loss, and scores every PREDICTED tick up to MarkAgeLimitMs
// under each of ceilingRules: the marks as shipped (which must give the
// replay's own figures), the marks placed by predictor.Filler.PlaceMarks
// from the true boxes of the road users each mover touches (the
// detector's velocities kept), without the movers that touch none, and
// with parts of the zone left out; and a rectangle around each connected
// part of the truly changed pixels. It logs recall and precision pooled
// over the pixels of those ticks, per drive and over all drives.
//
//	MARKS_CEILING=1 go test -count=1 ./bench -run TestDiagMarksCeiling -v
func TestDiagMarksCeiling(t *testing.T) {
	if os.Getenv("MARKS_CEILING") == "" {
		t.Skip("set MARKS_CEILING=1 to measure the marks with a perfect detection")
	}
	var drives []string
	if v := os.Getenv("MARKS_CEILING_DRIVES"); v != "" {
		drives = strings.Split(v, ",")
	} else {
		for seed := int64(1); seed <= 4; seed++ {
			d := filepath.Join(t.TempDir(), fmt.Sprintf("busy%d", seed))
			cfg := simdrive.Config{Width: 640, Height: 360, Traffic: true, Seed: seed}
			if err := simdrive.Generate(context.Background(), cfg, d, nil); err != nil {
				t.Fatal(err)
			}
			drives = append(drives, d)
		}
	}
	type acc struct{ hit, changed, marked int }
	all := make([]acc, len(ceilingRules))
	mk, and, labels, stats, cents := gocv.NewMat(), gocv.NewMat(), gocv.NewMat(), gocv.NewMat(), gocv.NewMat()
	defer func() {
		for _, m := range []*gocv.Mat{&mk, &and, &labels, &stats, &cents} {
			m.Close()
		}
	}()
	// boxesOf returns the bounding boxes of the connected parts of m.
	boxesOf := func(m gocv.Mat) []image.Rectangle {
		n := gocv.ConnectedComponentsWithStats(m, &labels, &stats, &cents)
		out := make([]image.Rectangle, n)
		for l := 1; l < n; l++ {
			x, y := int(stats.GetIntAt(l, int(gocv.CC_STAT_LEFT))), int(stats.GetIntAt(l, int(gocv.CC_STAT_TOP)))
			out[l] = image.Rect(x, y, x+int(stats.GetIntAt(l, int(gocv.CC_STAT_WIDTH))), y+int(stats.GetIntAt(l, int(gocv.CC_STAT_HEIGHT))))
		}
		return out
	}
	for _, drive := range drives {
		per := make([]acc, len(ceilingRules))
		rc := diagMarksReplay(drive, filepath.Join(t.TempDir(), "replay"), 0.1, 1)
		rc.marked = func(d markedTick) error {
			if d.AgeMs > MarkAgeLimitMs {
				return nil
			}
			w, h := d.Changed.Cols(), d.Changed.Rows()
			// The true boxes of the movers: the held frame's road users
			// each one touches.
			parts := boxesOf(d.HeldMask)
			var truth, kept []predictor.Mover
			for _, mv := range d.Filler.HeldMovers() {
				b := mv.Box.Intersect(image.Rect(0, 0, w, h))
				var tb image.Rectangle
				seen := map[int32]bool{}
				for y := b.Min.Y; y < b.Max.Y; y++ {
					for x := b.Min.X; x < b.Max.X; x++ {
						if l := labels.GetIntAt(y, x); l > 0 && !seen[l] {
							seen[l] = true
							tb = tb.Union(parts[l])
						}
					}
				}
				if !tb.Empty() {
					mv.Box = tb
					kept = append(kept, mv)
				}
				truth = append(truth, mv)
			}
			placedTruth, err := d.Filler.PlaceMarks(nil, truth, d.Motion)
			if err != nil {
				return err
			}
			placedKept, err := d.Filler.PlaceMarks(nil, kept, d.Motion)
			if err != nil {
				return err
			}
			changedParts := boxesOf(d.Changed)[1:]
			changed := gocv.CountNonZero(d.Changed)
			for i, r := range ceilingRules {
				mk = ensureGray(mk, w, h)
				mk.SetTo(gocv.NewScalar(0, 0, 0, 0))
				var zones []image.Rectangle
				switch marks := d.Marks; {
				case r.perfect:
					zones = changedParts
				default:
					if r.dropFalse {
						marks = placedKept
					} else if r.trueBoxes {
						marks = placedTruth
					}
					for _, mv := range marks {
						zones = append(zones, ceilingZone(mv, d.AgeMs, r))
					}
				}
				for _, z := range zones {
					if z = z.Intersect(image.Rect(0, 0, w, h)); !z.Empty() {
						roi := mk.Region(z)
						roi.SetTo(gocv.NewScalar(255, 0, 0, 0))
						roi.Close()
					}
				}
				clearOutside(&mk, d.Inner)
				if !d.Text.Empty() {
					roi := mk.Region(d.Text)
					roi.SetTo(gocv.NewScalar(0, 0, 0, 0))
					roi.Close()
				}
				gocv.BitwiseAnd(mk, d.Changed, &and)
				per[i].hit += gocv.CountNonZero(and)
				per[i].marked += gocv.CountNonZero(mk)
				per[i].changed += changed
			}
			return nil
		}
		sum, err := Replay(context.Background(), rc)
		if err != nil {
			t.Fatal(err)
		}
		if sum.Marks == nil {
			t.Fatalf("%s: the replay scored no marks; is it a drive made with simdrive --traffic?", drive)
		}
		ratio := func(a, b int) float64 { return float64(a) / math.Max(1, float64(b)) }
		// The shipped rule scores as the replay does (a check of this
		// harness, not of the marks).
		if r, p := ratio(per[0].hit, per[0].changed), ratio(per[0].hit, per[0].marked); math.Abs(r-float64(sum.Marks.RecallPooled)) > 1e-9 ||
			math.Abs(p-float64(sum.Marks.PrecisionPooled)) > 1e-9 {
			t.Errorf("%s: the marks as shipped score %.6f/%.6f here, %.6f/%.6f in the replay", drive, r, p,
				sum.Marks.RecallPooled, sum.Marks.PrecisionPooled)
		}
		t.Logf("%s (recall / precision pooled over ticks up to %d ms):", filepath.Base(drive), MarkAgeLimitMs)
		for i, r := range ceilingRules {
			t.Logf("  %-34s %.3f / %.3f", r.name, ratio(per[i].hit, per[i].changed), ratio(per[i].hit, per[i].marked))
			all[i].hit += per[i].hit
			all[i].changed += per[i].changed
			all[i].marked += per[i].marked
		}
	}
	t.Logf("all %d drives:", len(drives))
	for i, r := range ceilingRules {
		t.Logf("  %-34s %.3f / %.3f", r.name, float64(all[i].hit)/math.Max(1, float64(all[i].changed)),
			float64(all[i].hit)/math.Max(1, float64(all[i].marked)))
	}
}
