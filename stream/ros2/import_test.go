package ros2

import (
	"bytes"
	"context"
	"errors"
	"image"
	"image/color"
	"image/jpeg"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"

	"stopgap/internal/camera"
	"stopgap/stream/recording"
)

// testCamera is a small camera with a mount and distortion.
var testCamera = recording.Camera{Width: 32, Height: 24, Fx: 30, Fy: 31, Cx: 16, Cy: 12,
	K1: -0.1, K2: 0.01, P1: 0.001, P2: -0.001, HeightM: 1.4, PitchDeg: 3, RollDeg: 0.5, XOffsetM: 1.5, YOffsetM: -0.1}

// writeTestRecording writes a small recording with JPEG frames at 10 Hz
// and telemetry at 50 Hz (acceleration on every other row).
func writeTestRecording(t *testing.T, dir string, frames int) {
	t.Helper()
	w, err := recording.Create(dir, testCamera)
	if err != nil {
		t.Fatal(err)
	}
	for k := 0; k <= frames*5; k++ {
		row := recording.TelemetryRow{TimeUs: int64(k) * 20_000, SpeedMps: 10 + 0.01*float64(k), YawRateRps: 0.05 - 0.001*float64(k)}
		if k%2 == 0 {
			row.AccelMps2, row.HasAccel = 0.3, true
		}
		if err := w.WriteTelemetry(row); err != nil {
			t.Fatal(err)
		}
	}
	for i := range frames {
		img := image.NewRGBA(image.Rect(0, 0, testCamera.Width, testCamera.Height))
		for y := range testCamera.Height {
			for x := range testCamera.Width {
				img.Set(x, y, color.RGBA{uint8(8 * x), uint8(10 * y), uint8(20 * i), 255})
			}
		}
		var b bytes.Buffer
		if err := jpeg.Encode(&b, img, nil); err != nil {
			t.Fatal(err)
		}
		if err := w.WriteFrame(i, int64(i)*100_000+3, b.Bytes(), "jpg"); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
}

// exportMCAP writes recording dir to an MCAP file and returns its path.
func exportMCAP(t *testing.T, dir string) string {
	t.Helper()
	rec, err := recording.Open(dir)
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "drive.mcap")
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	mw, err := NewMCAPWriter(f)
	if err != nil {
		t.Fatal(err)
	}
	if err := ExportRecording(context.Background(), rec, "", mw); err != nil {
		t.Fatal(err)
	}
	if err := mw.Close(); err != nil {
		t.Fatal(err)
	}
	return path
}

func TestExportImportRoundTrip(t *testing.T) {
	src := filepath.Join(t.TempDir(), "src")
	writeTestRecording(t, src, 6)
	path := exportMCAP(t, src)

	topics, err := ListTopics(context.Background(), path)
	if err != nil {
		t.Fatal(err)
	}
	counts := map[string]int{}
	for _, tp := range topics {
		counts[tp.Topic] = tp.Messages
		if !tp.Supported() {
			t.Errorf("topic %s (%s) not supported", tp.Topic, tp.Type)
		}
	}
	want := map[string]int{DefaultTFStaticTopic: 1, ExportImageTopic: 6, ExportCameraInfoTopic: 6, ExportOdometryTopic: 31, ExportImuTopic: 31}
	if !reflect.DeepEqual(counts, want) {
		t.Fatalf("topic counts %v, want %v", counts, want)
	}

	for _, tc := range []struct {
		name string
		opts ImportOptions
	}{
		{"mount from tf_static with IMU", ImportOptions{}},
		{"mount from options, no IMU", ImportOptions{ImuTopic: "-", Mount: &Mount{XOffsetM: 1.5, YOffsetM: -0.1, HeightM: 1.4, PitchDeg: 3, RollDeg: 0.5}}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			out := filepath.Join(t.TempDir(), "imported")
			sum, err := Import(context.Background(), path, out, tc.opts)
			if err != nil {
				t.Fatal(err)
			}
			if sum.Frames != 6 || sum.TelemetrySamples != 31 {
				t.Fatalf("summary %+v", sum)
			}
			a, err := recording.Open(src)
			if err != nil {
				t.Fatal(err)
			}
			b, err := recording.Open(out)
			if err != nil {
				t.Fatal(err)
			}
			// Exactly: the mount from tf_static is quantized to 1e-9.
			ca, cb := a.Camera, b.Camera
			if ca != cb {
				t.Errorf("camera:\n got %+v\nwant %+v", cb, ca)
			}
			if len(a.Frames) != len(b.Frames) {
				t.Fatalf("%d frames, want %d", len(b.Frames), len(a.Frames))
			}
			for i := range a.Frames {
				pa, _ := a.FramePath(i)
				pb, _ := b.FramePath(i)
				da, _ := os.ReadFile(pa)
				db, _ := os.ReadFile(pb)
				if a.Frames[i].CaptureUs != b.Frames[i].CaptureUs || !bytes.Equal(da, db) {
					t.Errorf("frame %d differs (t %d vs %d, %d vs %d bytes)", i, a.Frames[i].CaptureUs, b.Frames[i].CaptureUs, len(da), len(db))
				}
			}
			withIMU := tc.opts.ImuTopic != "-"
			for i, r := range a.Telemetry {
				got := b.Telemetry[i]
				wantRow := r
				if !withIMU {
					wantRow.AccelMps2, wantRow.HasAccel = 0, false
				}
				if got != wantRow {
					t.Errorf("telemetry %d: got %+v, want %+v", i, got, wantRow)
				}
			}
		})
	}
}

func TestImportRawImage(t *testing.T) {
	path := filepath.Join(t.TempDir(), "raw.mcap")
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	mw, err := NewMCAPWriter(f)
	if err != nil {
		t.Fatal(err)
	}
	cam := recording.Camera{Width: 4, Height: 2, Fx: 4, Fy: 4, Cx: 2, Cy: 1}
	info := CameraInfoFromCamera(cam)
	info.Header.FrameID = "cam"
	must := func(err error) {
		t.Helper()
		if err != nil {
			t.Fatal(err)
		}
	}
	must(mw.Write("/info", TypeCameraInfo, 0, &info))
	// bgr8 with a padded step of 16 bytes: pixel (1,0) is pure red.
	data := make([]byte, 32)
	data[3+2] = 255
	must(mw.Write("/image", TypeImage, 0, &Image{Header: Header{Stamp: Time{Sec: 1}}, Width: 4, Height: 2, Encoding: "bgr8", Step: 16, Data: data}))
	must(mw.Write("/twist", TypeTwistStamped, 0, &TwistStamped{Header: Header{Stamp: Time{Sec: 1}}, Twist: Twist{Linear: Vector3{X: 3}}}))
	must(mw.Close())
	must(f.Close())
	out := filepath.Join(t.TempDir(), "rec")
	if _, err := Import(context.Background(), path, out, ImportOptions{Mount: &Mount{HeightM: 1}}); err != nil {
		t.Fatal(err)
	}
	rec, err := recording.Open(out)
	must(err)
	p, _ := rec.FramePath(0)
	fb, err := os.Open(p)
	must(err)
	defer fb.Close()
	img, _, err := image.Decode(fb)
	must(err)
	r, g, b, _ := img.At(1, 0).RGBA()
	if r>>8 != 255 || g != 0 || b != 0 {
		t.Fatalf("pixel (1,0) = %d %d %d, want pure red from bgr8", r>>8, g>>8, b>>8)
	}
	if rec.Telemetry[0].SpeedMps != 3 || rec.Telemetry[0].TimeUs != 1_000_000 {
		t.Fatalf("telemetry %+v", rec.Telemetry[0])
	}
}

func TestImportCorrupt(t *testing.T) {
	src := filepath.Join(t.TempDir(), "src")
	writeTestRecording(t, src, 4)
	path := exportMCAP(t, src)
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	corrupt := append([]byte(nil), data...)
	corrupt[len(corrupt)/3] ^= 0x55 // inside the first chunk's compressed data
	cases := map[string][]byte{
		"truncated at half":       data[:len(data)/2],
		"truncated before footer": data[:len(data)-20],
		"truncated after magic":   data[:8],
		"one byte flipped":        corrupt,
		"not MCAP":                []byte("frames.csv\nindex,t_capture_us\n"),
	}
	for name, b := range cases {
		t.Run(name, func(t *testing.T) {
			dir := t.TempDir()
			in := filepath.Join(dir, "bad.mcap")
			if err := os.WriteFile(in, b, 0o644); err != nil {
				t.Fatal(err)
			}
			out := filepath.Join(dir, "out")
			_, err := Import(context.Background(), in, out, ImportOptions{})
			var re *RecordError
			if !errors.As(err, &re) || !errors.Is(err, ErrMCAP) && !errors.Is(err, ErrCDR) {
				t.Fatalf("err = %v, want a *RecordError wrapping ErrMCAP or ErrCDR", err)
			}
			if re.File != in || re.Record == "" {
				t.Fatalf("error does not name the file and record: %v", err)
			}
			entries, _ := os.ReadDir(dir)
			if len(entries) != 1 {
				t.Fatalf("import left %d entries beside the input, want none: %v", len(entries)-1, entries)
			}
			t.Log(err)
		})
	}
}

func TestImportTopicErrors(t *testing.T) {
	src := filepath.Join(t.TempDir(), "src")
	writeTestRecording(t, src, 2)
	path := exportMCAP(t, src)
	for _, tc := range []struct {
		name string
		opts ImportOptions
		want error
	}{
		{"no such topic", ImportOptions{ImageTopic: "/nope"}, ErrTopic},
		{"wrong type", ImportOptions{ImageTopic: ExportOdometryTopic}, ErrTopic},
		{"no chain to base", ImportOptions{BaseFrame: "chassis"}, ErrMount},
	} {
		t.Run(tc.name, func(t *testing.T) {
			out := filepath.Join(t.TempDir(), "out")
			if _, err := Import(context.Background(), path, out, tc.opts); !errors.Is(err, tc.want) {
				t.Fatalf("err = %v, want %v", err, tc.want)
			}
			if _, err := os.Stat(out); !errors.Is(err, os.ErrNotExist) {
				t.Fatalf("output exists after a failed import")
			}
		})
	}
	// An existing non-empty output is refused.
	if _, err := Import(context.Background(), path, src, ImportOptions{}); !errors.Is(err, recording.ErrExists) {
		t.Fatalf("existing output: err = %v, want recording.ErrExists", err)
	}
}

func TestImportSeveralIMUs(t *testing.T) {
	path := filepath.Join(t.TempDir(), "imus.mcap")
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	mw, err := NewMCAPWriter(f)
	if err != nil {
		t.Fatal(err)
	}
	info := CameraInfoFromCamera(recording.Camera{Width: 4, Height: 2, Fx: 4, Fy: 4, Cx: 2, Cy: 1})
	for _, w := range []struct {
		topic, typ string
		m          cdrMessage
	}{
		{"/info", TypeCameraInfo, &info},
		{"/image", TypeImage, &Image{Width: 4, Height: 2, Encoding: "mono8", Step: 4, Data: make([]byte, 8)}},
		{"/twist", TypeTwistStamped, &TwistStamped{}},
		{"/imu/a", TypeImu, &Imu{}},
		{"/imu/b", TypeImu, &Imu{}},
	} {
		if err := mw.Write(w.topic, w.typ, 0, w.m); err != nil {
			t.Fatal(err)
		}
	}
	if err := mw.Close(); err != nil {
		t.Fatal(err)
	}
	f.Close()
	out := filepath.Join(t.TempDir(), "rec")
	mount := &Mount{HeightM: 1}
	if _, err := Import(context.Background(), path, out, ImportOptions{Mount: mount}); !errors.Is(err, ErrTopic) || !strings.Contains(err.Error(), "--imu-topic") {
		t.Fatalf("two IMU topics, none chosen: err = %v, want ErrTopic naming --imu-topic", err)
	}
	if _, err := Import(context.Background(), path, out, ImportOptions{Mount: mount, ImuTopic: "/imu/b"}); err != nil {
		t.Fatal(err)
	}
}

// TestImportWithIntrinsics imports a file without CameraInfo: the camera
// comes from the options (a calibration file), the mount from the static
// transform to the images' frame.
func TestImportWithIntrinsics(t *testing.T) {
	path := filepath.Join(t.TempDir(), "noinfo.mcap")
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	mw, err := NewMCAPWriter(f)
	if err != nil {
		t.Fatal(err)
	}
	want := Mount{XOffsetM: 1, HeightM: 1.2, PitchDeg: 7}
	tr, q := TransformFromMount(want)
	for _, w := range []struct {
		topic, typ string
		m          cdrMessage
	}{
		{DefaultTFStaticTopic, TypeTFMessage, &TFMessage{Transforms: []TransformStamped{{Header: Header{FrameID: "base_link"}, ChildFrameID: "cam", Translation: tr, Rotation: q}}}},
		{"/image", TypeImage, &Image{Header: Header{Stamp: Time{Sec: 1}, FrameID: "cam"}, Width: 4, Height: 2, Encoding: "mono8", Step: 4, Data: make([]byte, 8)}},
		{"/twist", TypeTwistStamped, &TwistStamped{Header: Header{Stamp: Time{Sec: 1}}}},
	} {
		if err := mw.Write(w.topic, w.typ, 0, w.m); err != nil {
			t.Fatal(err)
		}
	}
	if err := mw.Close(); err != nil {
		t.Fatal(err)
	}
	f.Close()
	if _, err := Import(context.Background(), path, filepath.Join(t.TempDir(), "a"), ImportOptions{}); !errors.Is(err, ErrTopic) {
		t.Fatalf("no CameraInfo and no intrinsics: err = %v, want ErrTopic", err)
	}
	// Given intrinsics are checked at the intrinsics level: a bad focal
	// length is named before the mount is looked at.
	bad := recording.Camera{Width: 4, Height: 2, Fx: 0, Fy: 3, Cx: 2, Cy: 1}
	if _, err := Import(context.Background(), path, filepath.Join(t.TempDir(), "c"), ImportOptions{Intrinsics: &bad}); !errors.Is(err, camera.ErrInvalid) || !strings.Contains(err.Error(), "the given intrinsics: invalid camera: fx = 0") {
		t.Fatalf("intrinsics with fx 0: err = %v, want camera.ErrInvalid naming fx", err)
	}
	in := recording.Camera{Width: 4, Height: 2, Fx: 3, Fy: 3, Cx: 2, Cy: 1, K1: 0.1, HeightM: 99}
	sum, err := Import(context.Background(), path, filepath.Join(t.TempDir(), "b"), ImportOptions{Intrinsics: &in})
	if err != nil {
		t.Fatal(err)
	}
	wantCam := in
	wantCam.XOffsetM, wantCam.YOffsetM, wantCam.HeightM, wantCam.PitchDeg, wantCam.RollDeg = want.XOffsetM, want.YOffsetM, want.HeightM, want.PitchDeg, want.RollDeg
	if sum.Camera != wantCam || sum.CameraInfoTopic != "" {
		t.Fatalf("camera %+v (info topic %q), want %+v", sum.Camera, sum.CameraInfoTopic, wantCam)
	}
}

func TestImportProgress(t *testing.T) {
	src := filepath.Join(t.TempDir(), "src")
	writeTestRecording(t, src, 3)
	path := exportMCAP(t, src)
	var calls, lastDone, lastTotal int
	monotone := true
	_, err := Import(context.Background(), path, filepath.Join(t.TempDir(), "out"), ImportOptions{Progress: func(done, total int) {
		if done < lastDone {
			monotone = false
		}
		calls++
		lastDone, lastTotal = done, total
	}})
	if err != nil {
		t.Fatal(err)
	}
	st, _ := os.Stat(path)
	wantTotal := int((3*st.Size() + 1<<20 - 1) >> 20)
	if calls == 0 || !monotone || lastDone != lastTotal || lastTotal != wantTotal {
		t.Fatalf("progress: %d calls, monotone %v, last %d/%d, want total %d", calls, monotone, lastDone, lastTotal, wantTotal)
	}
}
