package vp8

import (
	"bytes"
	"errors"
	"testing"
)

// Fuzz input layout for FuzzDecode: byte 0 is a mode, the rest is payload.
const (
	fuzzPrime      = 1 << 0 // decode a valid keyframe before the payload
	fuzzSplit      = 1 << 1 // payload is frames, each prefixed by a 2-byte little-endian length
	fuzzAllowSize  = 1 << 2 // DecoderConfig.AllowSizeChange
	fuzzThenInters = 1 << 3 // after the payload, decode the valid inter frames
)

// splitFrames cuts a fuzzSplit payload into frames (the last one gets what
// remains when a length runs past the end).
func splitFrames(p []byte) [][]byte {
	var out [][]byte
	for len(p) > 0 && len(out) < 16 {
		if len(p) < 2 {
			out = append(out, p)
			break
		}
		n := int(p[0]) | int(p[1])<<8
		p = p[2:]
		if n > len(p) {
			n = len(p)
		}
		out = append(out, p[:n])
		p = p[n:]
	}
	return out
}

func joinFrames(frames ...[]byte) []byte {
	var b []byte
	for _, f := range frames {
		b = append(b, byte(len(f)), byte(len(f)>>8))
		b = append(b, f...)
	}
	return b
}

// FuzzDecode feeds arbitrary bytes, alone or after a valid keyframe, as one
// frame or as a sequence, to a Decoder. It requires: no panic and no crash
// (a C crash kills the test binary), every error except ErrNotShown leaves
// the decoder waiting for a keyframe, every accepted picture is valid, and
// afterwards a real keyframe decodes bit-exactly like on a fresh decoder
// (or is refused with ErrSizeChanged when the fuzz input locked another
// size).
func FuzzDecode(f *testing.F) {
	s := smallStream(f)
	key, inter1, inter2, key6 := s.frames[0], s.frames[1], s.frames[2], s.frames[6]
	ref, err := NewDecoder()
	if err != nil {
		f.Fatal(err)
	}
	want := &Image{}
	if err := ref.Decode(key, want); err != nil {
		f.Fatal(err)
	}
	ref.Close()

	f.Add(append([]byte{0}, key...))
	f.Add(append([]byte{fuzzPrime}, inter1...))
	f.Add(append([]byte{fuzzPrime}, inter1[:len(inter1)/2]...))
	f.Add(append([]byte{0}, key[:len(key)/2]...))
	f.Add(append([]byte{0}, key[:11]...))
	f.Add(append([]byte{fuzzPrime | fuzzSplit}, joinFrames(inter1, inter2)...))
	f.Add(append([]byte{fuzzPrime | fuzzSplit | fuzzThenInters}, joinFrames(inter1[:5], key6)...))
	f.Add(append([]byte{fuzzSplit | fuzzAllowSize}, joinFrames(key, inter1, key6[:40], inter2)...))
	f.Add([]byte{fuzzPrime, 0x91, 0x0c, 0x00, 1, 2, 3})

	f.Fuzz(func(t *testing.T, data []byte) {
		if len(data) == 0 {
			return
		}
		mode, payload := data[0], data[1:]
		d, err := NewDecoderConfig(DecoderConfig{
			MaxWidth: 512, MaxHeight: 512, // keep fuzz executions fast
			AllowSizeChange: mode&fuzzAllowSize != 0,
		})
		if err != nil {
			t.Fatal(err)
		}
		defer d.Close()
		out := &Image{}
		check := func(what string, err error) {
			switch {
			case err == nil:
				if verr := out.Validate(); verr != nil {
					t.Fatalf("%s: accepted picture invalid: %v", what, verr)
				}
				if w, h := d.Size(); out.Width != w || out.Height != h {
					t.Fatalf("%s: picture %dx%d, decoder size %dx%d", what, out.Width, out.Height, w, h)
				}
			case errors.Is(err, ErrNotShown):
			default:
				if !d.NeedKeyframe() {
					t.Fatalf("%s: error %v left the decoder in step", what, err)
				}
			}
		}
		if mode&fuzzPrime != 0 {
			if err := d.Decode(key, out); err != nil {
				t.Fatalf("priming keyframe: %v", err)
			}
		}
		frames := [][]byte{payload}
		if mode&fuzzSplit != 0 {
			frames = splitFrames(payload)
		}
		for _, fr := range frames {
			check("fuzz frame", d.Decode(fr, out))
		}
		if mode&fuzzThenInters != 0 {
			check("inter 1", d.Decode(inter1, out))
			check("inter 2", d.Decode(inter2, out))
		}
		// Recovery: the real keyframe must decode exactly as on a fresh
		// decoder, whatever came before.
		d.Lost()
		err = d.Decode(key, out)
		if w, h := d.Size(); mode&fuzzAllowSize == 0 && (w != 64 || h != 48) && w != 0 {
			if !errors.Is(err, ErrSizeChanged) {
				t.Fatalf("keyframe after fuzz locked %dx%d: %v, want ErrSizeChanged", w, h, err)
			}
			return
		}
		if err != nil {
			t.Fatalf("keyframe after fuzz input: %v", err)
		}
		if !bytes.Equal(out.Y, want.Y) || !bytes.Equal(out.U, want.U) || !bytes.Equal(out.V, want.V) {
			t.Fatal("keyframe after fuzz input decodes differently from a fresh decoder")
		}
		if err := d.Decode(inter1, out); err != nil {
			t.Fatalf("inter frame after recovery: %v", err)
		}
	})
}
