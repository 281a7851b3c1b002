package rtpvp8

import (
	"errors"
	"testing"

	"github.com/pion/rtp/codecs"
)

func TestDescriptorUnmarshal(t *testing.T) {
	tests := []struct {
		name  string
		in    []byte
		want  Descriptor
		n     int
		err   error
		field string
	}{
		{"minimal start", []byte{0x10, 0xaa}, Descriptor{Start: true}, 1, nil, ""},
		{"continuation, PID 3, N", []byte{0x23, 0xaa}, Descriptor{NonReference: true, PartitionID: 3}, 1, nil, ""},
		{"reserved bits ignored", []byte{0x48 | 0x10, 0xaa}, Descriptor{Start: true}, 1, nil, ""},
		{"X with no optional field", []byte{0x90, 0x0f, 0xaa}, Descriptor{Start: true}, 2, nil, ""},
		{"7-bit picture ID", []byte{0x90, 0x80, 0x55, 0xaa}, Descriptor{Start: true, HasPictureID: true, PictureID: 0x55}, 3, nil, ""},
		{"15-bit picture ID", []byte{0x90, 0x80, 0x81, 0x02, 0xaa},
			Descriptor{Start: true, HasPictureID: true, WidePictureID: true, PictureID: 0x0102}, 4, nil, ""},
		{"all fields", []byte{0xb2, 0xf0, 0xff, 0xff, 0x07, 0xe9, 0xaa},
			Descriptor{NonReference: true, Start: true, PartitionID: 2, HasPictureID: true, WidePictureID: true, PictureID: 0x7fff,
				HasTL0PicIdx: true, TL0PicIdx: 7, HasTID: true, TID: 3, LayerSync: true, HasKeyIdx: true, KeyIdx: 9}, 6, nil, ""},
		{"T only: KEYIDX bits ignored", []byte{0x80, 0x20, 0x5f, 0xaa}, Descriptor{HasTID: true, TID: 1}, 3, nil, ""},
		{"K only: TID/Y bits ignored", []byte{0x80, 0x10, 0xff, 0xaa}, Descriptor{HasKeyIdx: true, KeyIdx: 31}, 3, nil, ""},
		{"empty", nil, Descriptor{}, 0, ErrShortDescriptor, "required octet"},
		{"X without extension octet", []byte{0x80}, Descriptor{}, 0, ErrShortDescriptor, "extension octet"},
		{"I without picture ID", []byte{0x80, 0x80}, Descriptor{}, 0, ErrShortDescriptor, "PictureID"},
		{"M without second octet", []byte{0x80, 0x80, 0x80}, Descriptor{}, 0, ErrShortDescriptor, "PictureID"},
		{"L without TL0PICIDX", []byte{0x80, 0x40}, Descriptor{}, 0, ErrShortDescriptor, "TL0PICIDX"},
		{"T without octet", []byte{0x80, 0x20}, Descriptor{}, 0, ErrShortDescriptor, "TID/Y/KEYIDX"},
		{"K without octet", []byte{0x80, 0x90, 0x01}, Descriptor{}, 0, ErrShortDescriptor, "TID/Y/KEYIDX"},
		{"no VP8 data", []byte{0x10}, Descriptor{}, 0, ErrNoVP8Data, "VP8 data"},
		{"no VP8 data after extensions", []byte{0x80, 0xf0, 0x80, 0x01, 0x02, 0x03}, Descriptor{}, 0, ErrNoVP8Data, "VP8 data"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			d := Descriptor{PictureID: 999} // must stay untouched on error
			n, err := d.Unmarshal(tc.in)
			if tc.err != nil {
				var de *DescriptorError
				if !errors.Is(err, tc.err) || !errors.As(err, &de) || de.Field != tc.field {
					t.Fatalf("err = %v, want %v in field %q", err, tc.err, tc.field)
				}
				if d != (Descriptor{PictureID: 999}) {
					t.Errorf("descriptor changed on error: %+v", d)
				}
				return
			}
			if err != nil || n != tc.n || d != tc.want {
				t.Fatalf("got %+v, n=%d, err=%v; want %+v, n=%d", d, n, err, tc.want, tc.n)
			}
			// Cross-check against pion's parser, used here as the reference.
			var ref codecs.VP8Packet
			data, perr := ref.Unmarshal(tc.in)
			if perr != nil {
				t.Fatalf("pion rejects what we accept: %v", perr)
			}
			if len(data) != len(tc.in)-n || !samePion(&d, &ref) {
				t.Errorf("pion reads %+v with %d data octets; we read %+v with %d", ref, len(data), d, len(tc.in)-n)
			}
		})
	}
}

// samePion reports whether our descriptor and pion's parse agree.
func samePion(d *Descriptor, p *codecs.VP8Packet) bool {
	b := func(v bool) uint8 { return boolBit(v) }
	return b(d.NonReference) == p.N && b(d.Start) == p.S && d.PartitionID == p.PID &&
		b(d.HasPictureID) == p.I && b(d.HasTL0PicIdx) == p.L && b(d.HasTID) == p.T && b(d.HasKeyIdx) == p.K &&
		d.PictureID == p.PictureID && d.TL0PicIdx == p.TL0PICIDX && d.TID == p.TID && b(d.LayerSync) == p.Y && d.KeyIdx == p.KEYIDX
}

func TestDescriptorMarshal(t *testing.T) {
	tests := []struct {
		name string
		d    Descriptor
		want []byte
		err  error
	}{
		{"zero", Descriptor{}, []byte{0x00}, nil},
		{"start N PID", Descriptor{Start: true, NonReference: true, PartitionID: 7}, []byte{0x37}, nil},
		{"15-bit picture ID", Descriptor{Start: true, HasPictureID: true, WidePictureID: true, PictureID: 0x1234},
			[]byte{0x90, 0x80, 0x92, 0x34}, nil},
		{"7-bit picture ID", Descriptor{HasPictureID: true, PictureID: 0x7f}, []byte{0x80, 0x80, 0x7f}, nil},
		{"TL0PICIDX and KEYIDX", Descriptor{HasTL0PicIdx: true, TL0PicIdx: 200, HasKeyIdx: true, KeyIdx: 5},
			[]byte{0x80, 0x50, 200, 0x05}, nil},
		{"TID and Y", Descriptor{HasTID: true, TID: 2, LayerSync: true}, []byte{0x80, 0x20, 0xa0}, nil},
		{"absent fields are not written", Descriptor{PictureID: 5000, TID: 9, KeyIdx: 200}, []byte{0x00}, nil},
		{"PID too big", Descriptor{PartitionID: 8}, nil, ErrFieldRange},
		{"7-bit picture ID too big", Descriptor{HasPictureID: true, PictureID: 128}, nil, ErrFieldRange},
		{"15-bit picture ID too big", Descriptor{HasPictureID: true, WidePictureID: true, PictureID: 0x8000}, nil, ErrFieldRange},
		{"TID too big", Descriptor{HasTID: true, TID: 4}, nil, ErrFieldRange},
		{"KEYIDX too big", Descriptor{HasKeyIdx: true, KeyIdx: 32}, nil, ErrFieldRange},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			buf := make([]byte, 8)
			n, err := tc.d.MarshalTo(buf)
			if !errors.Is(err, tc.err) {
				t.Fatalf("err = %v, want %v", err, tc.err)
			}
			if err != nil {
				return
			}
			if string(buf[:n]) != string(tc.want) || n != tc.d.MarshalSize() {
				t.Fatalf("wrote % x (size %d), want % x", buf[:n], tc.d.MarshalSize(), tc.want)
			}
			if _, err := tc.d.MarshalTo(buf[:n-1]); !errors.Is(err, ErrShortBuffer) {
				t.Errorf("short buffer: err = %v, want ErrShortBuffer", err)
			}
		})
	}
}
