package vp8_test

import (
	"errors"
	"fmt"

	"stopgap/stream/vp8"
)

// Example encodes three pictures, loses the second frame on the way and
// shows the decoder refusing the next inter frame until a requested
// keyframe arrives.
func Example() {
	const w, h = 64, 48
	enc, err := vp8.NewEncoder(vp8.EncoderConfig{Width: w, Height: h, BitrateBps: 200_000})
	if err != nil {
		fmt.Println(err)
		return
	}
	defer enc.Close()
	dec, err := vp8.NewDecoder()
	if err != nil {
		fmt.Println(err)
		return
	}
	defer dec.Close()

	bgr := make([]byte, w*h*3) // a grey picture, as a camera or gocv.Mat would give
	for i := range bgr {
		bgr[i] = 128
	}
	picture := &vp8.Image{}    // decoded I420, owned by us, reused per frame
	out := make([]byte, w*h*3) // decoded BGR for display

	var frame []byte
	for i := 0; i < 5; i++ {
		if i == 3 {
			enc.ForceKeyframe() // the receiver sent a PLI
		}
		var key bool
		frame, key, err = enc.EncodeBGR(frame, bgr, int64(i)*33_333)
		if err != nil {
			fmt.Println(err)
			return
		}
		if i == 1 {
			dec.Lost() // frame 1 never arrived (RTP sequence gap)
			fmt.Printf("frame %d lost, need keyframe: %v\n", i, dec.NeedKeyframe())
			continue
		}
		err = dec.Decode(frame, picture)
		switch {
		case errors.Is(err, vp8.ErrNeedKeyframe):
			fmt.Printf("frame %d (key %v): dropped, waiting for a keyframe\n", i, key)
			continue
		case err != nil:
			fmt.Println(err)
			return
		}
		if err := vp8.I420ToBGR(out, picture); err != nil {
			fmt.Println(err)
			return
		}
		fmt.Printf("frame %d (key %v): %dx%d, centre pixel B=%d\n", i, key, picture.Width, picture.Height, out[(h/2*w+w/2)*3])
	}
	// Output:
	// frame 0 (key true): 64x48, centre pixel B=128
	// frame 1 lost, need keyframe: true
	// frame 2 (key false): dropped, waiting for a keyframe
	// frame 3 (key true): 64x48, centre pixel B=128
	// frame 4 (key false): 64x48, centre pixel B=128
}
