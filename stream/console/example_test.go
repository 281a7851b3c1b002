package console_test

import (
	"fmt"
	"io"
	"log/slog"
	"net/http/httptest"
	"strings"
	"time"

	"stopgap/internal/display"
	"stopgap/stream/console"
)

// Example shows the wiring: build the console, serve it, hand it one frame
// and its meta message per display tick, and read the operator's cutoff.
func Example() {
	c, err := console.New(console.Config{
		Token:    "example-token-0123456789",
		Limits:   console.Limits{MinCutoff: 0.3, MaxCutoff: 0.9},
		Profiles: []console.Profile{{Name: "city", Cutoff: 0.6}},
		KeyframeNeeded: func(r console.KeyframeReason) {
			// tell the egress encoder to make its next frame a keyframe
		},
		Logger: slog.New(slog.NewTextHandler(io.Discard, nil)),
	})
	if err != nil {
		fmt.Println(err)
		return
	}
	defer c.Close()
	srv := httptest.NewServer(c) // the command serves it on 127.0.0.1 (with TLS if remote)
	defer srv.Close()

	// per display tick:
	vp8 := []byte{0x50, 0x01, 0x00, 0x9d, 0x01, 0x2a, 0x40, 0x01, 0xb4, 0x00} // from the egress encoder
	if err := c.WriteFrame(vp8, time.Second/30); err != nil {
		fmt.Println(err)
	}
	err = c.WriteMeta(console.Meta{Seq: 1, TimeUs: 33333, State: display.StatePredicted, AgeMs: 120, PeriodMs: 1000.0 / 30,
		Confidence: 0.8, Cutoff: c.Cutoff(), Profile: c.Profile()})
	if err != nil {
		fmt.Println(err)
	}

	// the operator asks for more than the administrator allows
	_, err = c.SetCutoff(console.CutoffRequest{Cutoff: ptr(0.95)})
	fmt.Println(err)
	fmt.Println(c.Profile(), c.Cutoff())
	fmt.Println(strings.Replace(c.PageURL("http://127.0.0.1:8088"), c.Token(), "TOKEN", 1))
	// Output:
	// cutoff 0.95 is outside the administrator's limits [0.3, 0.9]; choose a value in that range or ask the administrator to change the limits
	// city 0.6
	// http://127.0.0.1:8088/#token=TOKEN
}

// ExampleStatusLateAfterMs: how long the page keeps showing LIVE after a
// LIVE status with no newer one, for a few camera rates (Meta.PeriodMs).
func ExampleStatusLateAfterMs() {
	for _, fps := range []float64{60, 30, 15, 5} {
		fmt.Printf("%2.0f fps: STATE UNKNOWN (%s) %.0f ms after the last LIVE status\n",
			fps, console.ReasonStatusLate, console.StatusLateAfterMs(1000/fps))
	}
	// Output:
	// 60 fps: STATE UNKNOWN (status-late) 100 ms after the last LIVE status
	// 30 fps: STATE UNKNOWN (status-late) 100 ms after the last LIVE status
	// 15 fps: STATE UNKNOWN (status-late) 200 ms after the last LIVE status
	//  5 fps: STATE UNKNOWN (status-late) 300 ms after the last LIVE status
}

func ptr[T any](v T) *T { return &v }
