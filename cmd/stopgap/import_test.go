package main

import (
	"bytes"
	"context"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"stopgap/bench"
	"stopgap/bench/simdrive"
	"stopgap/filter"
	"stopgap/internal/camera"
	"stopgap/internal/lossmodel"
	"stopgap/predictor"
	"stopgap/stream/recording"
	"stopgap/stream/ros2"
)

// TestImportRoundTripScores renders a small simdrive drive, writes it to
// MCAP with the exporter (the MCAP library's writer), imports it with the
// import command, and replays both recordings with the same seeded loss:
// every figure of the two summaries must be equal. Steering angles are not
// carried (none of the message types read has them), so the filter is CTRV
// without a wheelbase, which ignores steering; with a wheelbase (the CLI's
// default 2.7 m) or the bicycle model the imported drive has no steering
// and its scores differ.
func TestImportRoundTripScores(t *testing.T) {
	dir := t.TempDir()
	drive := filepath.Join(dir, "drive")
	cfg := simdrive.Config{Width: 160, Height: 90, FPS: 15, DurationS: 4, Seed: 3}
	if err := simdrive.Generate(context.Background(), cfg, drive, nil); err != nil {
		t.Fatal(err)
	}
	mcapFile := filepath.Join(dir, "drive.mcap")
	imported := filepath.Join(dir, "imported")
	var out, errb bytes.Buffer
	for _, args := range [][]string{
		{"export", "--drive", drive, "--out", mcapFile},
		{"import", "--mcap", mcapFile, "--list"},
		{"import", "--mcap", mcapFile, "--out", imported, "--quiet"},
	} {
		if code := run(context.Background(), args, &out, &errb); code != 0 {
			t.Fatalf("stopgap %v: exit %d\n%s", args, code, errb.String())
		}
	}
	if !strings.Contains(out.String(), "sensor_msgs/msg/CompressedImage") {
		t.Fatalf("--list output lacks the image topic:\n%s", out.String())
	}
	// The camera comes back exactly, the mount through /tf_static included
	// (at 1280x720 a pitch of 4.999999999999999 instead of 5 already moves
	// the fourth digit of the scores; this small drive would not show it).
	ca, err := camera.ReadFile(filepath.Join(drive, recording.CameraFile))
	if err != nil {
		t.Fatal(err)
	}
	cb, err := camera.ReadFile(filepath.Join(imported, recording.CameraFile))
	if err != nil {
		t.Fatal(err)
	}
	if ca != cb {
		t.Fatalf("camera.json differs:\noriginal %+v\nimported %+v", ca, cb)
	}
	replay := func(d string) bench.Summary {
		t.Helper()
		sum, err := bench.Replay(context.Background(), bench.ReplayConfig{
			Drive: d, Out: filepath.Join(dir, filepath.Base(d)+"-report"),
			Loss:     lossmodel.Config{Model: lossmodel.GilbertElliott, LossRate: 0.2, BurstMs: 200, Seed: 7},
			Policy:   predictor.DefaultPolicy(),
			Filter:   filter.Config{Model: filter.ModelCTRV},
			Examples: -1,
			// A still clock: synthesis times are the only figures that
			// differ from run to run, and they are not what is compared.
			Now: func() time.Time { return time.Unix(0, 0) },
		})
		if err != nil {
			t.Fatal(err)
		}
		sum.Drive = ""
		return sum
	}
	a, b := replay(drive), replay(imported)
	if a.PredictedTicks == 0 {
		t.Fatalf("no predicted tick: the comparison would be empty: %+v", a)
	}
	// truth.csv is the simulator's exact pose, which no ROS 2 message
	// carries: only the original drive has the calibration against truth.
	// It must be there, and is left out of the comparison.
	if a.CalibrationTruth.Frames == 0 || b.CalibrationTruth.Frames != 0 {
		t.Fatalf("calibration against truth: original %d ticks, imported %d; want >0 and 0", a.CalibrationTruth.Frames, b.CalibrationTruth.Frames)
	}
	a.CalibrationTruth, b.CalibrationTruth = bench.Calibration{}, bench.Calibration{}
	// controls.csv (the operator's commands) has no ROS 2 message either:
	// the original has it (unused by this CTRV replay), the import not.
	if a.Commands.Count == 0 || a.Commands.Used || b.Commands.Count != 0 {
		t.Fatalf("commands: original %+v, imported %+v; want recorded but unused, and none", a.Commands, b.Commands)
	}
	a.Commands, b.Commands = bench.CommandsUse{}, bench.CommandsUse{}
	ja, _ := json.Marshal(a)
	jb, _ := json.Marshal(b)
	if !bytes.Equal(ja, jb) {
		t.Fatalf("imported recording replays differently:\noriginal %s\nimported %s", ja, jb)
	}
}

// TestCameraCommand converts OpenCV's calibration sample output (opencv-doc)
// into a camera.json that the recording reader accepts, and refuses a file
// without the image size, naming what is missing.
func TestCameraCommand(t *testing.T) {
	out := filepath.Join(t.TempDir(), "camera.json")
	var so, se bytes.Buffer
	args := []string{"camera", "--calibration", "/usr/share/doc/opencv-doc/examples/data/left_intrinsics.yml", "--out", out, "--height-m", "1.4", "--pitch-deg", "5"}
	if code := run(context.Background(), args, &so, &se); code != 0 {
		t.Fatalf("exit %d: %s", code, se.String())
	}
	cam, err := camera.ReadFile(out)
	if err != nil {
		t.Fatal(err)
	}
	if cam.Width != 640 || cam.Fx != 5.3591573396163199e+02 || cam.HeightM != 1.4 || cam.PitchDeg != 5 {
		t.Fatalf("camera %+v", cam)
	}
	if code := run(context.Background(), args, &so, &se); code == 0 {
		t.Fatal("an existing --out was replaced without --overwrite")
	}
	se.Reset()
	args = []string{"camera", "--calibration", "/usr/share/doc/opencv-doc/examples/aruco/tutorial_camera_params.yml", "--out", out + "2", "--height-m", "1"}
	if code := run(context.Background(), args, &so, &se); code != 1 || !strings.Contains(se.String(), "image_width") {
		t.Fatalf("exit %d, stderr %q: want 1 and a message naming image_width", code, se.String())
	}
}

// TestExportReplay writes a replay's states and shown frames beside the
// recording: one state per tick, one labelled frame per missing tick.
func TestExportReplay(t *testing.T) {
	dir := t.TempDir()
	drive := filepath.Join(dir, "drive")
	cfg := simdrive.Config{Width: 160, Height: 90, FPS: 15, DurationS: 3, Seed: 5}
	if err := simdrive.Generate(context.Background(), cfg, drive, nil); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(dir, "replay.mcap")
	report := filepath.Join(dir, "report")
	var so, se bytes.Buffer
	args := []string{"export", "--drive", drive, "--out", out, "--replay-report", report, "--frame-loss-rate", "0.25", "--seed", "2", "--quiet"}
	if code := run(context.Background(), args, &so, &se); code != 0 {
		t.Fatalf("exit %d: %s", code, se.String())
	}
	if !strings.Contains(se.String(), "CAUTION") {
		t.Error("export of predicted frames did not print the safety caution")
	}
	var sum bench.Summary
	b, err := os.ReadFile(filepath.Join(report, "summary.json"))
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &sum); err != nil {
		t.Fatal(err)
	}
	ticks, err := os.ReadFile(filepath.Join(report, "ticks.csv"))
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(strings.SplitN(string(ticks), "\n", 3)[1], "LIVE") {
		t.Skip("the first frame was lost with this seed; pick another so every missing tick has a held frame")
	}
	topics, err := ros2.ListTopics(context.Background(), out)
	if err != nil {
		t.Fatal(err)
	}
	n := map[string]int{}
	for _, tp := range topics {
		n[tp.Topic] = tp.Messages
	}
	if sum.TicksMissing == 0 || n[ros2.TickStateTopic] != sum.TicksTotal || n[ros2.ShownImageTopic] != sum.TicksMissing {
		t.Fatalf("states %d (ticks %d), shown frames %d (missing ticks %d)", n[ros2.TickStateTopic], sum.TicksTotal, n[ros2.ShownImageTopic], sum.TicksMissing)
	}
	// Two image topics now: the importer asks which one.
	se.Reset()
	if code := run(context.Background(), []string{"import", "--mcap", out, "--out", filepath.Join(dir, "re"), "--quiet"}, &so, &se); code != 1 || !strings.Contains(se.String(), "--image-topic") {
		t.Fatalf("import of a file with two image topics: exit %d, %q", code, se.String())
	}
	if code := run(context.Background(), []string{"import", "--mcap", out, "--out", filepath.Join(dir, "re"), "--quiet", "--image-topic", ros2.ExportImageTopic}, &so, &se); code != 0 {
		t.Fatalf("import with --image-topic: exit %d: %s", code, se.String())
	}
}
