package simdrive_test

import (
	"context"
	"fmt"
	"log"
	"os"
	"path/filepath"

	"stopgap/bench/simdrive"
	"stopgap/stream/recording"
)

// ExampleGenerate renders a one-second drive at a small size and reads it
// back as a recording.
func ExampleGenerate() {
	tmp, err := os.MkdirTemp("", "simdrive-example")
	if err != nil {
		log.Fatal(err)
	}
	defer os.RemoveAll(tmp)
	out := filepath.Join(tmp, "drive")

	cfg := simdrive.Config{Width: 320, Height: 180, DurationS: 1, GroundTexelM: 0.1, Seed: 42}
	if err := simdrive.Generate(context.Background(), cfg, out, nil); err != nil {
		log.Fatal(err)
	}
	r, err := recording.Open(out)
	if err != nil {
		log.Fatal(err)
	}
	fmt.Println(len(r.Frames), "frames,", len(r.Telemetry), "telemetry rows,", len(r.Truth), "truth rows")
	fmt.Printf("fx %.0f px, camera %.1f m high, pitched %.0f deg down\n", r.Camera.Fx, r.Camera.HeightM, r.Camera.PitchDeg)
	// Output:
	// 30 frames, 101 telemetry rows, 30 truth rows
	// fx 160 px, camera 1.4 m high, pitched 5 deg down
}
