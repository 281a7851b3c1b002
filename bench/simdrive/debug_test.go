package simdrive

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strconv"
	"testing"

	"gocv.io/x/gocv"
)

// TestDebugGenerate writes a short drive and PNG copies of a few frames for
// eyeballing when SIMDRIVE_DEBUG_OUT names a new directory. Skipped otherwise.
func TestDebugGenerate(t *testing.T) {
	out := os.Getenv("SIMDRIVE_DEBUG_OUT")
	if out == "" {
		t.Skip("set SIMDRIVE_DEBUG_OUT to write a debug drive")
	}
	// SIMDRIVE_DEBUG_SECONDS overrides the 10 s default duration.
	dur := 10.0
	if v, err := strconv.ParseFloat(os.Getenv("SIMDRIVE_DEBUG_SECONDS"), 64); err == nil {
		dur = v
	}
	if err := Generate(context.Background(), Config{DurationS: dur}, out, nil); err != nil {
		t.Fatal(err)
	}
	for _, i := range []int{0, 60, 150, 240, int(dur*DefaultFPS) - 1} {
		if i >= int(dur*DefaultFPS) {
			continue
		}
		img := gocv.IMRead(filepath.Join(out, "frames", fmt.Sprintf("%06d.jpg", i)), gocv.IMReadColor)
		gocv.IMWrite(filepath.Join(out, fmt.Sprintf("frame%03d.png", i)), img)
		img.Close()
	}
}
