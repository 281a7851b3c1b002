package vp8

import (
	"errors"
	"testing"
)

func TestParseHeader(t *testing.T) {
	// Hand-built keyframe per RFC 6386 section 9.1: tag = key(0) |
	// version 0 | show_frame 1 (bit 4) | first_part_size 10 << 5 = 0x150,
	// little endian 50 01 00; start code 9d 01 2a; width 320 = 0x0140 with
	// horizontal scale 1 in the top bits = 0x4140 -> 40 41; height 240 =
	// 0x00f0 -> f0 00; then 10 bytes of partition.
	key := append([]byte{0x50, 0x01, 0x00, 0x9d, 0x01, 0x2a, 0x40, 0x41, 0xf0, 0x00}, make([]byte, 10)...)
	// Inter frame: tag bit 0 = 1, version 1 (bits 1-3 = 001 -> 0x02),
	// show 1 (0x10), size 4 << 5 = 0x80: 0x80|0x10|0x02|0x01 = 0x93.
	inter := []byte{0x93, 0x00, 0x00, 1, 2, 3, 4}
	clone := func(b []byte, f func([]byte)) []byte {
		c := append([]byte(nil), b...)
		f(c)
		return c
	}
	cases := []struct {
		name    string
		in      []byte
		want    Header
		wantErr error
	}{
		{"keyframe", key, Header{Type: FrameTypeKey, ShowFrame: true, FirstPartSize: 10, Width: 320, Height: 240, HorizScale: 1}, nil},
		{"inter", inter, Header{Type: FrameTypeInter, Version: 1, ShowFrame: true, FirstPartSize: 4}, nil},
		{"empty", nil, Header{}, ErrEmptyFrame},
		{"two bytes", []byte{0x93, 0}, Header{}, ErrShortFrame},
		{"keyframe cut in header", key[:9], Header{}, ErrShortFrame},
		{"bad start code", clone(key, func(b []byte) { b[4] = 0x02 }), Header{}, ErrBadHeader},
		{"zero width", clone(key, func(b []byte) { b[6], b[7] = 0, 0x40 }), Header{}, ErrBadHeader},
		{"reserved version", clone(inter, func(b []byte) { b[0] |= 0x0e }), Header{}, ErrBadHeader},
		{"zero first partition", []byte{0x11, 0, 0, 1}, Header{}, ErrBadHeader},
		{"partition past end", key[:19], Header{}, ErrTruncated},
		{"inter partition past end", inter[:6], Header{}, ErrTruncated},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			h, err := ParseHeader(c.in)
			if c.wantErr != nil {
				if !errors.Is(err, c.wantErr) {
					t.Fatalf("err = %v, want %v", err, c.wantErr)
				}
				return
			}
			if err != nil {
				t.Fatalf("unexpected error %v", err)
			}
			if h != c.want {
				t.Errorf("got %+v, want %+v", h, c.want)
			}
		})
	}
	if !IsKeyframe(key) || IsKeyframe(inter) || IsKeyframe(nil) {
		t.Error("IsKeyframe disagrees with ParseHeader")
	}
}

func TestFrameTypeString(t *testing.T) {
	for _, c := range []struct {
		t    FrameType
		want string
	}{{FrameTypeInvalid, "invalid"}, {FrameTypeKey, "key"}, {FrameTypeInter, "inter"}, {FrameType(9), "invalid"}} {
		if got := c.t.String(); got != c.want {
			t.Errorf("%d.String() = %q, want %q", int(c.t), got, c.want)
		}
	}
}

func FuzzParseHeader(f *testing.F) {
	f.Add([]byte{0x50, 0x01, 0x00, 0x9d, 0x01, 0x2a, 0x40, 0x01, 0xf0, 0x00, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0})
	f.Add([]byte{0x93, 0x00, 0x00, 1, 2, 3, 4})
	f.Add([]byte{})
	f.Fuzz(func(t *testing.T, b []byte) {
		h, err := ParseHeader(b)
		if err != nil {
			return
		}
		hdr := tagLen
		if h.Type == FrameTypeKey {
			hdr = keyHeaderLen
			if h.Width < 1 || h.Height < 1 || h.Width > maxDimension || h.Height > maxDimension {
				t.Fatalf("accepted size %dx%d", h.Width, h.Height)
			}
		}
		if h.FirstPartSize < 1 || h.FirstPartSize > len(b)-hdr || h.Version > 3 {
			t.Fatalf("accepted header %+v for %d bytes", h, len(b))
		}
		if IsKeyframe(b) != (h.Type == FrameTypeKey) {
			t.Fatal("IsKeyframe disagrees")
		}
	})
}
