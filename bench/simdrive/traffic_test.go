package simdrive

import (
	"context"
	"os"
	"path/filepath"
	"testing"

	"gocv.io/x/gocv"
)

// TestTrafficMaskIsExact renders the same poses with and without traffic:
// outside the movers mask the two frames must be identical (the road users
// change nothing else), and inside it they must differ almost everywhere (the
// mask covers nothing but road users; a few pixels of a face may match
// the background by chance).
func TestTrafficMaskIsExact(t *testing.T) {
	cfg := Config{Width: 320, Height: 180, DurationS: 6}
	tr, _, _, plain := testWorld(t, cfg)
	_, _, sc, busy := testWorld(t, cfg)
	sc.placeTraffic(tr, cfg.DurationS, 1)
	busy.Close()
	busy = newRenderer(busy.cam, busy.w, busy.h, sc)
	defer busy.Close()
	diff, gray, outside := gocv.NewMat(), gocv.NewMat(), gocv.NewMat()
	defer diff.Close()
	defer gray.Close()
	defer outside.Close()
	seen := 0
	for _, us := range []int64{0, 1_000_000, 2_500_000, 4_000_000, 5_500_000} {
		p := tr.PoseAt(us)
		plain.render(p)
		busy.tS = float64(us) * 1e-6
		busy.render(p)
		gocv.AbsDiff(plain.frame, busy.frame, &diff)
		gocv.CvtColor(diff, &gray, gocv.ColorBGRToGray)
		gocv.Threshold(gray, &gray, 0, 255, gocv.ThresholdBinary)
		gocv.BitwiseNot(busy.movers, &outside)
		inMask, changed := gocv.CountNonZero(busy.movers), gocv.CountNonZero(gray)
		gocv.BitwiseAnd(gray, outside, &outside)
		if n := gocv.CountNonZero(outside); n != 0 {
			t.Errorf("t=%d us: %d pixels changed outside the movers mask, want 0", us, n)
		}
		if changed < inMask*9/10 {
			t.Errorf("t=%d us: %d of %d mask pixels changed, want at least 90 %%", us, changed, inMask)
		}
		seen += inMask
	}
	if seen == 0 {
		t.Fatal("no road user visible in five frames")
	}
}

// TestTrafficOffWritesNoMasks: the default drive has no movers directory,
// a drive with traffic one mask per frame.
func TestTrafficOffWritesNoMasks(t *testing.T) {
	dir := t.TempDir()
	for _, traffic := range []bool{false, true} {
		out := filepath.Join(dir, map[bool]string{false: "plain", true: "busy"}[traffic])
		if err := Generate(context.Background(), Config{Width: 64, Height: 36, DurationS: 0.2, Traffic: traffic}, out, nil); err != nil {
			t.Fatal(err)
		}
		ents, err := os.ReadDir(filepath.Join(out, MoverMaskDir))
		switch {
		case !traffic && !os.IsNotExist(err):
			t.Errorf("without traffic: %s exists (%v)", MoverMaskDir, err)
		case traffic && (err != nil || len(ents) != 6):
			t.Errorf("with traffic: %d masks (%v), want 6", len(ents), err)
		}
	}
}
