package e2e

import (
	"bytes"
	"context"
	"image/jpeg"
	"os"
	"path/filepath"
	"testing"
	"time"

	"stopgap/bench"
	"stopgap/predictor"
	"stopgap/stream/recording"
	"stopgap/stream/relay"
	"stopgap/stream/simvehicle"
	"stopgap/stream/whip"
)

// publishVehicle plays rec (looped) from this process to the relay at base
// until stop is called or the test ends; it returns once the vehicle plays.
// onFrame, if not nil, sees every frame handed to the link.
func publishVehicle(t testing.TB, rec *recording.Recording, base string, onFrame ...func(simvehicle.FrameInfo)) (veh *simvehicle.Vehicle, stop func()) {
	t.Helper()
	cfg := simvehicle.Config{Recording: rec, Loop: true, CacheFrames: true}
	if len(onFrame) > 0 {
		cfg.OnFrame = onFrame[0]
	}
	veh, err := simvehicle.New(cfg)
	if err != nil {
		t.Fatal(err)
	}
	return veh, playVehicle(t, veh, base)
}

// playVehicle is publishVehicle for a vehicle made with simvehicle.New.
func playVehicle(t testing.TB, veh *simvehicle.Vehicle, base string) (stop func()) {
	t.Helper()
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() {
		done <- veh.Publish(ctx, base+"/whip", ingestToken, whip.PublishConfig{Network: whip.Network{LoopbackOnly: true}})
	}()
	var stopped bool
	stop = func() {
		if !stopped {
			stopped = true
			cancel()
			<-done
		}
	}
	t.Cleanup(stop)
	select {
	case <-veh.Started():
	case err := <-done:
		stopped = true
		t.Fatalf("vehicle: %v", err)
	case <-time.After(15 * time.Second):
		t.Fatal("vehicle did not start playing within 15 s")
	}
	return stop
}

// completeLines counts the newline-terminated lines of a file after its
// header.
func completeLines(t testing.TB, path string) int {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	return max(0, bytes.Count(b, []byte("\n"))-1)
}

// TestRelayKilledWhileRecording kills a relay process with SIGKILL while it
// records a live session, three times at different moments, and checks that
// (1) recording.Open, the strict reader, opens what is left; (2) it holds
// every frame whose frames.csv line was complete when the process died, and
// the newest of them is a whole JPEG; (3) a replay of it with its recorded
// arrivals runs (bench.Replay).
func TestRelayKilledWhileRecording(t *testing.T) {
	if testing.Short() {
		t.Skip("three relay processes on loopback, about 15 s")
	}
	mode := requireEgress(t)
	dir := t.TempDir()
	drive := renderDrive(t, dir, 320, 180, 4)
	rec, err := recording.Open(drive)
	if err != nil {
		t.Fatal(err)
	}
	for i, after := range []time.Duration{1500 * time.Millisecond, 2300 * time.Millisecond, 3100 * time.Millisecond} {
		recDir := filepath.Join(dir, "relay-recording-"+string(rune('a'+i)))
		rc := startChild(t, "relay", childDriveEnv+"="+drive, childRecordEnv+"="+recDir)
		_, stopVehicle := publishVehicle(t, rec, rc.ready)
		framesCSV := filepath.Join(recDir, recording.FramesFile)
		waitFor(t, "the relay to record frames", 15*time.Second, func() bool {
			_, err := os.Stat(framesCSV)
			return err == nil && completeLines(t, framesCSV) > 10
		})
		time.Sleep(after)
		rc.kill(t)
		stopVehicle()
		lines := completeLines(t, framesCSV)

		got, err := recording.Open(recDir)
		if err != nil {
			t.Fatalf("kill %d (egress %s): the strict reader refuses the killed relay's recording: %v", i, mode, err)
		}
		// Ticks whose frame never arrived have a blank file field and are
		// frames too; the reader keeps every complete line.
		if len(got.Frames) != lines {
			t.Errorf("kill %d: %d frames read, %d complete lines in frames.csv", i, len(got.Frames), lines)
		}
		last := -1
		for k := len(got.Frames) - 1; k >= 0; k-- {
			if got.Frames[k].File != "" {
				last = k
				break
			}
		}
		if last < 0 {
			t.Fatalf("kill %d: no frame with an image in %d rows", i, len(got.Frames))
		}
		b, err := os.ReadFile(filepath.Join(recDir, got.Frames[last].File))
		if err != nil {
			t.Fatal(err)
		}
		if _, err := jpeg.Decode(bytes.NewReader(b)); err != nil {
			t.Errorf("kill %d: the last recorded frame %s is not a whole JPEG: %v", i, got.Frames[last].File, err)
		}
		sum, err := bench.Replay(context.Background(), bench.ReplayConfig{
			Drive: recDir, Out: filepath.Join(dir, "replay-"+string(rune('a'+i))),
			ArrivalsFile: filepath.Join(recDir, recording.ArrivalsFile), Policy: predictor.DefaultPolicy(),
			AllowanceMs: relay.DefaultAllowanceMs, Examples: -1, Logger: quietLogger(),
		})
		if err != nil {
			t.Fatalf("kill %d: replay of the killed relay's recording: %v", i, err)
		}
		if sum.TicksTotal == 0 || sum.LiveTicks == 0 {
			t.Errorf("kill %d: replay ran %d ticks, %d LIVE; want some of each", i, sum.TicksTotal, sum.LiveTicks)
		}
		t.Logf("kill %d, %v after recording began (egress %s): %d frames read (%d complete lines), last image row %d, %d incomplete lines dropped, warnings %q; replay: %d ticks, %d LIVE, %d PREDICTED, %d STALE",
			i, after, mode, len(got.Frames), lines, last, got.DroppedLines, got.Warnings, sum.TicksTotal, sum.LiveTicks, sum.PredictedTicks, sum.StaleTicks)
	}
}
