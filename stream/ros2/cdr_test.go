package ros2

import (
	"bytes"
	"encoding/binary"
	"errors"
	"math"
	"reflect"
	"testing"
)

// Hand-built payloads following the plain CDR rules (OMG CORBA 3.x part 2,
// 9.3 "CDR Transfer Syntax"; encapsulation header from OMG DDS-RTPS 2.x,
// 10.2): primitives aligned to their size from the first byte after the
// 4-byte header, strings as uint32 length counting the NUL.

func f64le(v float64) []byte { return binary.LittleEndian.AppendUint64(nil, math.Float64bits(v)) }
func f64be(v float64) []byte { return binary.BigEndian.AppendUint64(nil, math.Float64bits(v)) }

func cat(parts ...[]byte) []byte { return bytes.Join(parts, nil) }

// twistStampedLE: stamp 7 s 500000000 ns, frame "base_link", linear
// (12.5, -0.25, 0), angular (0, 0, -0.031).
func twistStampedLE() []byte {
	return cat(
		[]byte{0x00, 0x01, 0x00, 0x00},      // CDR_LE, options 0
		[]byte{7, 0, 0, 0},                  // offset 0: sec int32
		[]byte{0x00, 0x65, 0xCD, 0x1D},      // offset 4: nanosec 500000000 = 0x1DCD6500
		[]byte{10, 0, 0, 0},                 // offset 8: string length 10 ("base_link" + NUL)
		[]byte("base_link\x00"),             // offsets 12..21
		[]byte{0, 0},                        // offsets 22..23: pad to 8 for float64
		f64le(12.5), f64le(-0.25), f64le(0), // linear at 24, 32, 40
		f64le(0), f64le(0), f64le(-0.031), // angular at 48, 56, 64
	)
}

func TestCDRHandBuilt(t *testing.T) {
	want := TwistStamped{
		Header: Header{Stamp: Time{7, 500_000_000}, FrameID: "base_link"},
		Twist:  Twist{Linear: Vector3{12.5, -0.25, 0}, Angular: Vector3{0, 0, -0.031}},
	}
	be := cat(
		[]byte{0x00, 0x00, 0x00, 0x00}, // CDR_BE
		[]byte{0, 0, 0, 7}, []byte{0x1D, 0xCD, 0x65, 0x00},
		[]byte{0, 0, 0, 10}, []byte("base_link\x00"), []byte{0, 0},
		f64be(12.5), f64be(-0.25), f64be(0), f64be(0), f64be(0), f64be(-0.031),
	)
	// An empty frame id: length 1, one NUL, then padding 13 -> 16.
	emptyFrame := cat([]byte{0, 1, 0, 0}, []byte{7, 0, 0, 0}, []byte{0x00, 0x65, 0xCD, 0x1D},
		[]byte{1, 0, 0, 0}, []byte{0}, []byte{0, 0, 0},
		f64le(12.5), f64le(-0.25), f64le(0), f64le(0), f64le(0), f64le(-0.031))
	wantEmpty := want
	wantEmpty.Header.FrameID = ""
	for _, tc := range []struct {
		name    string
		payload []byte
		want    TwistStamped
	}{
		{"little-endian", twistStampedLE(), want},
		{"big-endian", be, want},
		{"empty frame id", emptyFrame, wantEmpty},
	} {
		t.Run(tc.name, func(t *testing.T) {
			var got TwistStamped
			if err := got.UnmarshalCDR(tc.payload); err != nil {
				t.Fatal(err)
			}
			if !reflect.DeepEqual(got, tc.want) {
				t.Fatalf("got %+v, want %+v", got, tc.want)
			}
		})
	}
	// Our encoder writes exactly the hand-built little-endian bytes.
	if got := want.AppendCDR(nil); !bytes.Equal(got, twistStampedLE()) {
		t.Fatalf("AppendCDR:\n got % x\nwant % x", got, twistStampedLE())
	}
}

func TestCDRCompressedImageHandBuilt(t *testing.T) {
	// stamp 1 s 0 ns, frame "cam" (len 4), format "jpeg" (len 5 at 16),
	// data of 3 bytes: its uint32 count aligns from 25 to 28.
	p := cat([]byte{0, 1, 0, 0}, []byte{1, 0, 0, 0}, []byte{0, 0, 0, 0},
		[]byte{4, 0, 0, 0}, []byte("cam\x00"),
		[]byte{5, 0, 0, 0}, []byte("jpeg\x00"), []byte{0, 0, 0},
		[]byte{3, 0, 0, 0}, []byte{0xFF, 0xD8, 0xFF})
	var m CompressedImage
	if err := m.UnmarshalCDR(p); err != nil {
		t.Fatal(err)
	}
	if m.Header.Stamp.Us() != 1_000_000 || m.Header.FrameID != "cam" || m.Format != "jpeg" || !bytes.Equal(m.Data, []byte{0xFF, 0xD8, 0xFF}) {
		t.Fatalf("got %+v", m)
	}
	if got := m.AppendCDR(nil); !bytes.Equal(got, p) {
		t.Fatalf("AppendCDR:\n got % x\nwant % x", got, p)
	}
}

func TestCDRErrors(t *testing.T) {
	good := twistStampedLE()
	noNUL := append([]byte(nil), good...)
	noNUL[25] = 'x' // the NUL after "base_link" (payload bytes 16..25)
	hugeLen := append([]byte(nil), good...)
	binary.LittleEndian.PutUint32(hugeLen[12:], 0xFFFFFFF0)
	xcdr2 := append([]byte(nil), good...)
	xcdr2[1] = 0x07
	for _, tc := range []struct {
		name    string
		payload []byte
		field   string
	}{
		{"empty", nil, "encapsulation"},
		{"XCDR2", xcdr2, "encapsulation"},
		{"truncated in a double", good[:len(good)-3], "twist.angular.z"},
		{"truncated in the padding", good[:4+23], "twist.linear.x"},
		{"string without NUL", noNUL, "header.frame_id"},
		{"length beyond the payload", hugeLen, "header.frame_id"},
		{"trailing bytes", append(append([]byte(nil), good...), 1, 2, 3, 4, 5, 6, 7, 8), TypeTwistStamped},
	} {
		t.Run(tc.name, func(t *testing.T) {
			var m TwistStamped
			err := m.UnmarshalCDR(tc.payload)
			var ce *CDRError
			if !errors.As(err, &ce) || !errors.Is(err, ErrCDR) {
				t.Fatalf("err = %v, want a *CDRError", err)
			}
			if ce.Field != tc.field {
				t.Fatalf("field %q, want %q (%v)", ce.Field, tc.field, err)
			}
		})
	}
}

// sampleMessages returns one message of each type with every field set.
func sampleMessages() map[string]interface {
	cdrMessage
	UnmarshalCDR([]byte) error
} {
	h := Header{Stamp: Time{1712345678, 901234000}, FrameID: "base_link"}
	info := CameraInfo{Header: h, Height: 720, Width: 1280, DistortionModel: "plumb_bob",
		D: []float64{-0.1, 0.01, 0.001, -0.002, 0}, K: [9]float64{900, 0, 640, 0, 905, 360, 0, 0, 1},
		R: [9]float64{1, 0, 0, 0, 1, 0, 0, 0, 1}, P: [12]float64{900, 0, 640, 0, 0, 905, 360, 0, 0, 0, 1, 0},
		BinningX: 1, ROI: RegionOfInterest{1, 2, 3, 4, true}}
	odo := Odometry{Header: h, ChildFrameID: "base_link", Position: Vector3{1, 2, 3}, Orientation: Quaternion{0, 0, 0.6, 0.8},
		Twist: Twist{Vector3{10, 0.1, 0}, Vector3{0, 0, 0.2}}}
	odo.PoseCovariance[7] = 0.5
	odo.TwistCovariance[35] = 0.01
	imu := Imu{Header: h, Orientation: Quaternion{W: 1}, AngularVelocity: Vector3{0.01, -0.02, 0.3}, LinearAcceleration: Vector3{1.5, 0, 9.81}}
	imu.OrientationCovariance[0] = -1
	return map[string]interface {
		cdrMessage
		UnmarshalCDR([]byte) error
	}{
		TypeCompressedImage: &CompressedImage{Header: h, Format: "jpeg", Data: []byte{0xFF, 0xD8, 0xFF, 0xE0}},
		TypeImage:           &Image{Header: h, Height: 2, Width: 2, Encoding: "rgb8", Step: 6, Data: make([]byte, 12)},
		TypeCameraInfo:      &info,
		TypeOdometry:        &odo,
		TypeTwistStamped:    &TwistStamped{Header: h, Twist: Twist{Vector3{1, 2, 3}, Vector3{4, 5, 6}}},
		TypeImu:             &imu,
		TypeTFMessage: &TFMessage{Transforms: []TransformStamped{
			{Header: h, ChildFrameID: "camera_optical_frame", Translation: Vector3{1.5, 0, 1.4}, Rotation: Quaternion{-0.5, 0.5, -0.5, 0.5}},
			{Header: h, ChildFrameID: "imu", Rotation: Quaternion{W: 1}},
		}},
	}
}

// newMessage returns a zero message of type typ.
func newMessage(typ string) interface {
	cdrMessage
	UnmarshalCDR([]byte) error
} {
	switch typ {
	case TypeCompressedImage:
		return new(CompressedImage)
	case TypeImage:
		return new(Image)
	case TypeCameraInfo:
		return new(CameraInfo)
	case TypeOdometry:
		return new(Odometry)
	case TypeTwistStamped:
		return new(TwistStamped)
	case TypeImu:
		return new(Imu)
	case TypeTFMessage:
		return new(TFMessage)
	}
	return nil
}

func TestCDRRoundTrip(t *testing.T) {
	for typ, m := range sampleMessages() {
		t.Run(typ, func(t *testing.T) {
			p := m.AppendCDR(nil)
			got := newMessage(typ)
			if err := got.UnmarshalCDR(p); err != nil {
				t.Fatal(err)
			}
			if !reflect.DeepEqual(got, m) {
				t.Fatalf("got %+v\nwant %+v", got, m)
			}
			// Every strict prefix is an error, never a panic.
			for n := 0; n < len(p)-3; n++ {
				if err := newMessage(typ).UnmarshalCDR(p[:n]); err == nil {
					t.Fatalf("prefix of %d of %d bytes decoded without error", n, len(p))
				}
			}
		})
	}
}

func TestTimeUs(t *testing.T) {
	for _, us := range []int64{0, 1, 999_999, 1_000_000, 1712345678901234, -1, -1_500_000} {
		if got := TimeFromUs(us).Us(); got != us {
			t.Errorf("TimeFromUs(%d).Us() = %d", us, got)
		}
	}
	if got := (Time{Sec: 1, Nanosec: 999}).Us(); got != 1_000_000 {
		t.Errorf("sub-microsecond nanoseconds: got %d, want truncation to 1000000", got)
	}
}
