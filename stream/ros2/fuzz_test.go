package ros2

import (
	"bytes"
	"context"
	"errors"
	"testing"

	"github.com/foxglove/mcap/go/mcap"
)

// FuzzUnmarshalCDR decodes arbitrary payloads as every supported type. The
// property, which the decoder does not check on itself: whatever decodes
// re-encodes (little-endian, our encoder) to a payload that decodes to the
// same message, compared by re-encoding it once more (bit for bit, so NaN
// payloads count too).
func FuzzUnmarshalCDR(f *testing.F) {
	f.Add(twistStampedLE())
	for _, m := range sampleMessages() {
		f.Add(m.AppendCDR(nil))
	}
	f.Add([]byte{0, 0, 0, 0, 0, 0, 0, 1})
	f.Fuzz(func(t *testing.T, payload []byte) {
		for typ := range msgDefs {
			m := newMessage(typ)
			if m == nil {
				continue
			}
			err := m.UnmarshalCDR(payload)
			if err != nil {
				var ce *CDRError
				if !errors.As(err, &ce) {
					t.Fatalf("%s: error %v is not a *CDRError", typ, err)
				}
				continue
			}
			once := m.AppendCDR(nil)
			again := newMessage(typ)
			if err := again.UnmarshalCDR(once); err != nil {
				t.Fatalf("%s: re-encoded payload does not decode: %v", typ, err)
			}
			if twice := again.AppendCDR(nil); !bytes.Equal(once, twice) {
				t.Fatalf("%s: round trip differs:\n%+v\n%+v", typ, m, again)
			}
		}
	})
}

// FuzzScanMCAP feeds arbitrary bytes to the MCAP scanner. Property: it
// never panics, whatever it rejects is a *RecordError naming a record, and
// for a file it accepts the MCAP library's own unindexed reader yields the
// same number of messages.
func FuzzScanMCAP(f *testing.F) {
	var b bytes.Buffer
	mw, err := NewMCAPWriter(&b)
	if err != nil {
		f.Fatal(err)
	}
	for i, m := range []cdrMessage{&TwistStamped{}, &Imu{}} {
		typ := []string{TypeTwistStamped, TypeImu}[i]
		if err := mw.Write("/t"+typ, typ, int64(i), m); err != nil {
			f.Fatal(err)
		}
	}
	if err := mw.Close(); err != nil {
		f.Fatal(err)
	}
	f.Add(b.Bytes())
	f.Add(b.Bytes()[:len(b.Bytes())/2])
	f.Fuzz(func(t *testing.T, data []byte) {
		visited := 0
		err := scanReader(context.Background(), bytes.NewReader(data), "fuzz.mcap", func(ch *mcap.Channel, s *mcap.Schema, m *mcap.Message) error {
			visited++
			return nil
		})
		if err != nil {
			var re *RecordError
			if !errors.As(err, &re) || re.Record == "" {
				t.Fatalf("error %v is not a *RecordError naming a record", err)
			}
			return
		}
		r, err := mcap.NewReader(bytes.NewReader(data))
		if err != nil {
			t.Fatalf("scan accepted what the library's reader refuses: %v", err)
		}
		defer r.Close()
		it, err := r.Messages(mcap.UsingIndex(false))
		if err != nil {
			t.Fatalf("library iterator: %v", err)
		}
		n := 0
		for {
			_, _, _, err := it.NextInto(nil)
			if err != nil {
				break
			}
			n++
		}
		if n != visited {
			t.Fatalf("scan visited %d messages, the library's reader %d", visited, n)
		}
	})
}
