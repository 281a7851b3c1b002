package e2e

import (
	"context"
	"crypto/sha256"
	"errors"
	"testing"
	"time"

	"github.com/pion/rtp"

	"stopgap/stream/rtpvp8"
	"stopgap/stream/vp8"
)

// decodedFrame is one frame of a decoded RTP stream: the SHA-256 of its luma
// plane, or the decode error.
type decodedFrame struct {
	ts   uint32
	key  bool
	hash [32]byte
	err  error
}

// decodeStream assembles and decodes packets (in arrival order) as a
// console's decoder would: libvpx, frames in sequence order, losses
// reported. It returns the frames and the number of assembler losses.
func decodeStream(t *testing.T, pkts []rtp.Packet) ([]decodedFrame, int) {
	t.Helper()
	dec, err := vp8.NewDecoder()
	if err != nil {
		t.Fatal(err)
	}
	defer dec.Close()
	var img vp8.Image
	var out []decodedFrame
	losses := 0
	asm, err := rtpvp8.NewAssembler(rtpvp8.AssemblerConfig{ReorderPackets: rtpvp8.DefaultMaxPackets / 2}, rtpvp8.SinkFuncs{
		Frame: func(f rtpvp8.Frame) {
			d := decodedFrame{ts: f.RTPTimestamp, key: f.Keyframe}
			if err := dec.Decode(f.Data, &img); err != nil {
				if errors.Is(err, vp8.ErrNotShown) {
					return
				}
				d.err = err
			} else {
				h := sha256.New()
				for y := 0; y < img.Height; y++ {
					h.Write(img.Y[y*img.YStride : y*img.YStride+img.Width])
				}
				copy(d.hash[:], h.Sum(nil))
			}
			out = append(out, d)
		},
		Loss: func(rtpvp8.Loss) { losses++; dec.Lost() },
	})
	if err != nil {
		t.Fatal(err)
	}
	at := time.Unix(0, 0)
	for i := range pkts {
		if err := asm.Push(&pkts[i], at); err != nil {
			t.Fatalf("packet %d: %v", i, err)
		}
	}
	asm.Flush(at)
	return out, losses
}

// TestPassThroughSwitchesDecode checks what the console's decoder makes of
// the relay's output across switches between passed-through and
// relay-encoded frames. A Go viewer keeps every packet the console sends
// while the link has two outages (each: LIVE, passed through -> PREDICTED,
// STALE from the relay's encoder -> LIVE, transcoded -> LIVE, passed through
// from the vehicle's next keyframe); afterwards the viewer's stream and the
// vehicle's own stream (every packet the link let through) are decoded with
// libvpx, the console browser's decoder. Required:
//
//   - the viewer's stream decodes without a single error or corrupt picture
//     (the decoder wrapper checks VP8D_GET_FRAME_CORRUPTED), so no frame
//     was decoded against a reference from the other encoder;
//   - a passed-through frame is the vehicle's picture exactly: tolerance
//     zero, since the bitstream and the decoder are the same and only a
//     wrong reference could change a pixel. Such frames are recognised by
//     their luma hash; within each run of them the vehicle frames follow one
//     another without a gap;
//   - at least two switches each way.
func TestPassThroughSwitchesDecode(t *testing.T) {
	if testing.Short() {
		t.Skip("real-time loopback run of about 12 s")
	}
	r := startRig(t, rigOptions{width: 320, height: 180, driveS: 6, keepWire: true})
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()
	v, err := dialViewer(ctx, r.base, consoleToken)
	if err != nil {
		t.Fatal(err)
	}
	defer v.Close()
	v.mu.Lock()
	v.keep = true
	v.mu.Unlock()
	waitFor(t, "the viewer to receive frames", 15*time.Second, func() bool {
		_, f := v.snapshot()
		return len(f) > 30
	})
	for range 2 {
		time.Sleep(1500 * time.Millisecond)
		if _, err := r.link.OutageNow(600 * time.Millisecond); err != nil {
			t.Fatal(err)
		}
		time.Sleep(600 * time.Millisecond)
	}
	time.Sleep(2500 * time.Millisecond)
	v.mu.Lock()
	got := append([]rtp.Packet(nil), v.pkts...)
	v.mu.Unlock()
	r.mu.Lock()
	wire := append([]rtp.Packet(nil), r.wirePkts...)
	r.mu.Unlock()
	r.stop()

	vehicle, _ := decodeStream(t, wire)
	index := map[[32]byte]int{}
	for i, f := range vehicle {
		if f.err == nil {
			index[f.hash] = i
		}
	}
	viewer, losses := decodeStream(t, got)
	if losses != 0 {
		t.Errorf("the viewer's stream had %d losses on loopback", losses)
	}
	var runs []string // "fwd" or "enc", one per run of frames
	prev := -1        // vehicle frame of the previous viewer frame, in a run of forwarded frames
	forwarded, encoded := 0, 0
	for i, f := range viewer {
		if f.err != nil {
			t.Errorf("viewer frame %d (key %v) did not decode: %v", i, f.key, f.err)
			prev = -1
			continue
		}
		kind := "enc"
		j, ok := index[f.hash]
		if ok {
			kind = "fwd"
			forwarded++
			if prev >= 0 && j != prev+1 {
				t.Errorf("viewer frame %d is vehicle frame %d right after vehicle frame %d in a run of passed-through frames", i, j, prev)
			}
			prev = j
		} else {
			encoded++
			prev = -1
		}
		if len(runs) == 0 || runs[len(runs)-1] != kind {
			runs = append(runs, kind)
			if kind == "fwd" && !f.key {
				t.Errorf("viewer frame %d starts a run of passed-through frames but is not a keyframe", i)
			}
		}
	}
	toEnc, toFwd := 0, 0
	for i := 1; i < len(runs); i++ {
		if runs[i] == "enc" {
			toEnc++
		} else {
			toFwd++
		}
	}
	t.Logf("viewer: %d frames (%d passed through, bit-exact; %d from the relay's encoder), runs %v; vehicle: %d frames", len(viewer), forwarded, encoded, runs, len(vehicle))
	if toEnc < 2 || toFwd < 2 {
		t.Errorf("%d switches to the relay's encoder and %d back to pass-through, want at least 2 each", toEnc, toFwd)
	}
}
