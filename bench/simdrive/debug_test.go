package simdrive

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
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
	if err := Generate(context.Background(), Config{DurationS: 10}, out, nil); err != nil {
		t.Fatal(err)
	}
	for _, i := range []int{0, 60, 150, 240} {
		img := gocv.IMRead(filepath.Join(out, "frames", fmt.Sprintf("%06d.jpg", i)), gocv.IMReadColor)
		gocv.IMWrite(filepath.Join(out, fmt.Sprintf("frame%03d.png", i)), img)
		img.Close()
	}
}
