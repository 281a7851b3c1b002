package rtpvp8

import (
	"encoding/binary"
	"errors"
	"os"
	"strconv"
	"strings"
	"testing"
)

func TestParseFrameHeader(t *testing.T) {
	// Frame tag layout from RFC 6386 section 9.1: bit 0 P (0 = keyframe),
	// bits 1-3 version, bit 4 show_frame, bits 5-23 first_part_size.
	tag := func(key bool, version, show, size uint32) []byte {
		v := version<<1 | show<<4 | size<<5
		if !key {
			v |= 1
		}
		return []byte{byte(v), byte(v >> 8), byte(v >> 16)}
	}
	key := func(size uint32, w, h uint16) []byte {
		b := append(tag(true, 0, 1, size), 0x9d, 0x01, 0x2a, byte(w), byte(w>>8), byte(h), byte(h>>8))
		return append(b, make([]byte, size)...)
	}
	tests := []struct {
		name string
		in   []byte
		want FrameHeader
		err  error
	}{
		{"inter frame", append(tag(false, 2, 1, 4), 1, 2, 3, 4),
			FrameHeader{Version: 2, ShowFrame: true, FirstPartSize: 4, HeaderLen: 3}, nil},
		{"hidden inter frame", append(tag(false, 0, 0, 0), 9),
			FrameHeader{HeaderLen: 3}, nil},
		{"keyframe 640x480", key(2, 640, 480),
			FrameHeader{Keyframe: true, ShowFrame: true, FirstPartSize: 2, HeaderLen: 10, Width: 640, Height: 480}, nil},
		{"keyframe with scaling bits", key(0, 0x4000|1280, 0xc000|720),
			FrameHeader{Keyframe: true, ShowFrame: true, HeaderLen: 10, Width: 1280, Height: 720, HorizScale: 1, VertScale: 3}, nil},
		{"largest first partition size", append(tag(false, 0, 1, 1<<19-1), make([]byte, 1<<19-1)...),
			FrameHeader{ShowFrame: true, FirstPartSize: 1<<19 - 1, HeaderLen: 3}, nil},
		{"empty", nil, FrameHeader{}, ErrShortFrame},
		{"two octets", []byte{0x11, 0}, FrameHeader{}, ErrShortFrame},
		{"keyframe cut short", key(0, 16, 16)[:9], FrameHeader{}, ErrShortFrame},
		{"keyframe bad start code", append(tag(true, 0, 1, 0), 0x9d, 0x01, 0x2b, 16, 0, 16, 0), FrameHeader{}, ErrBadStartCode},
		{"keyframe zero width", key(0, 0, 16), FrameHeader{}, ErrZeroSize},
		{"first partition past the end", append(tag(false, 0, 1, 5), 1, 2, 3, 4), FrameHeader{}, ErrBadPartitionSize},
		{"keyframe partition past the end", key(3, 16, 16)[:12], FrameHeader{}, ErrBadPartitionSize},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			h, err := ParseFrameHeader(tc.in)
			if tc.err != nil {
				var fe *FrameHeaderError
				if !errors.Is(err, tc.err) || !errors.As(err, &fe) {
					t.Fatalf("err = %v, want %v", err, tc.err)
				}
				return
			}
			if err != nil || h != tc.want {
				t.Fatalf("got %+v, %v; want %+v", h, err, tc.want)
			}
			if IsKeyframe(tc.in) != tc.want.Keyframe {
				t.Errorf("IsKeyframe = %v, want %v", !tc.want.Keyframe, tc.want.Keyframe)
			}
		})
	}
	if IsKeyframe(nil) {
		t.Error("IsKeyframe(nil) = true")
	}
}

// refFrame is one frame of testdata/vp8-96x64.ivf with what libvpx said
// about it (testdata/vp8-96x64.csv, written by testdata/genivf).
type refFrame struct {
	data            []byte
	encKey, peekKey bool
	peekW, peekH    int
}

// loadReference reads the libvpx-encoded test stream. IVF layout: 32-octet
// file header, then per frame a 4-octet little-endian size, an 8-octet
// timestamp and the frame (the layout genivf writes).
func loadReference(t testing.TB) []refFrame {
	t.Helper()
	ivf, err := os.ReadFile("testdata/vp8-96x64.ivf")
	if err != nil {
		t.Fatal(err)
	}
	csv, err := os.ReadFile("testdata/vp8-96x64.csv")
	if err != nil {
		t.Fatal(err)
	}
	if len(ivf) < 32 || string(ivf[:4]) != "DKIF" || string(ivf[8:12]) != "VP80" {
		t.Fatal("testdata/vp8-96x64.ivf: not a VP8 IVF file")
	}
	lines := strings.Split(strings.TrimSpace(string(csv)), "\n")[1:]
	var out []refFrame
	pos := 32
	for i, line := range lines {
		f := strings.Split(line, ",")
		if len(f) != 6 || pos+12 > len(ivf) {
			t.Fatalf("testdata/vp8-96x64.csv line %d: bad line or IVF too short", i+2)
		}
		size := int(binary.LittleEndian.Uint32(ivf[pos:]))
		pos += 12
		if want, _ := strconv.Atoi(f[1]); want != size || pos+size > len(ivf) {
			t.Fatalf("frame %d: IVF size %d, CSV size %s", i, size, f[1])
		}
		w, _ := strconv.Atoi(f[4])
		h, _ := strconv.Atoi(f[5])
		out = append(out, refFrame{data: ivf[pos : pos+size], encKey: f[2] == "1", peekKey: f[3] == "1", peekW: w, peekH: h})
		pos += size
	}
	return out
}

// TestParseFrameHeaderLibvpx checks keyframe detection and the picture size
// against what libvpx 1.12 reported when it encoded the stream: the encoder's
// VPX_FRAME_IS_KEY flag and vpx_codec_peek_stream_info.
func TestParseFrameHeaderLibvpx(t *testing.T) {
	keys := 0
	for i, f := range loadReference(t) {
		h, err := ParseFrameHeader(f.data)
		if err != nil {
			t.Errorf("frame %d: %v", i, err)
			continue
		}
		if h.Keyframe != f.encKey || h.Keyframe != f.peekKey || IsKeyframe(f.data) != f.encKey {
			t.Errorf("frame %d: Keyframe = %v, libvpx says %v (encoder) / %v (peek)", i, h.Keyframe, f.encKey, f.peekKey)
		}
		if h.Keyframe {
			keys++
			if h.Width != f.peekW || h.Height != f.peekH {
				t.Errorf("frame %d: size %dx%d, libvpx peek says %dx%d", i, h.Width, h.Height, f.peekW, f.peekH)
			}
		}
		if !h.ShowFrame {
			t.Errorf("frame %d: show_frame = 0 in a realtime stream", i)
		}
	}
	if keys != 2 {
		t.Errorf("found %d keyframes, the encoder was forced to make 2", keys)
	}
}
