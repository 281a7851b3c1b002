package relay

import (
	"fmt"

	"gocv.io/x/gocv"

	"stopgap/predictor"
	"stopgap/stream/vp8"
)

// picture is one decoded frame on its way from the ingest to the display
// loop: the decoder's I420 planes (img) and, once converted, the same
// picture in BGR (bgr, valid while hasBGR; allocated by the first toBGR).
// The pipeline's pool of pictures
// bounds the frames in flight: the ingest takes one from pipeline.free,
// decodes into it and hands it over in a frameEvent; the display loop
// returns it.
//
// The ingest converts to BGR at once only when the display loop will need
// the BGR picture for this frame whatever happens: the frame is not passed
// through (the relay encodes it), or the relay records frames or feeds the
// video ego-motion (pipeline.needBGR). A frame that passed through is kept
// as I420 (deferred, below) and converted only when a gap needs it.
type picture struct {
	img    vp8.Image
	bgr    gocv.Mat
	hasBGR bool
}

// allocBGR allocates bgr at width x height unless it exists (the pool's
// pictures all have the camera's size).
func (pc *picture) allocBGR(width, height int) {
	if pc.bgr.Ptr() == nil {
		pc.bgr = gocv.NewMatWithSize(height, width, gocv.MatTypeCV8UC3)
	}
}

// close frees bgr if it was allocated.
func (pc *picture) close() {
	if pc.bgr.Ptr() != nil {
		pc.bgr.Close()
	}
}

// toBGR converts the I420 planes into bgr, once. bgr is allocated on the
// first conversion (the picture's size: the camera's, checked by the ingest)
// and kept: a relay whose frames pass through converts few of them, so most
// pictures of the pool never need one.
func (pc *picture) toBGR() error {
	if pc.hasBGR {
		return nil
	}
	pc.allocBGR(pc.img.Width, pc.img.Height)
	buf, err := pc.bgr.DataPtrUint8()
	if err == nil {
		err = vp8.I420ToBGR(buf, &pc.img)
	}
	if err != nil {
		return fmt.Errorf("relay: converting a decoded frame to BGR: %w", err)
	}
	pc.hasBGR = true
	return nil
}

// deferred holds the newest real frames that passed through to the console
// unconverted, oldest first: as many as the gap filler keeps
// (predictor.Filler: the held frame for the warp, the one before it, and
// predictor.MoverHistory older ones, among which the upright and mover
// estimates take their comparison frame, up to 200 ms before the held
// one). flush hands them to the Filler (Hold) in order, converted to BGR,
// before anything reads the Filler's frames: a gap tick, a frame the relay
// encodes, a late frame. The Filler then holds what it would hold had each
// frame been handed over as it came (TestDeferredConversionShowsTheSame),
// at the cost of up to eight conversions on the first tick of a gap after
// a run of pass-through frames instead of one on every frame.
//
// Buffers: the I420 planes of a deferred frame are swapped in from the
// picture that brought it (add), not copied, and the picture leaves with
// the planes add swapped out; bgr is the conversion scratch. All are owned
// by the pipeline's display loop. The zero value is empty and ready; bgr is
// allocated on the first flush.
type deferred struct {
	n      int // frames held: frames[:n]
	frames [predictor.MoverHistory + 2]struct {
		img       vp8.Image
		captureUs int64
	}
	bgr gocv.Mat
}

// add keeps pc's planes as the newest deferred frame captured at captureUs,
// swapping them with a free slot's, following the Filler's rule for a newer
// real frame: a frame older than the newest one known (deferred, or else
// newestUs when haveNewest) is not kept, and one with the same capture time
// replaces it.
func (d *deferred) add(pc *picture, captureUs, newestUs int64, haveNewest bool) {
	if d.n > 0 {
		newestUs, haveNewest = d.frames[d.n-1].captureUs, true
	}
	switch {
	case haveNewest && captureUs < newestUs:
		return
	case d.n > 0 && captureUs == newestUs:
		d.n-- // replaced below
	case d.n == len(d.frames):
		// Drop the oldest; its buffers become the free slot.
		oldest := d.frames[0]
		copy(d.frames[:], d.frames[1:])
		d.frames[len(d.frames)-1] = oldest
		d.n--
	}
	f := &d.frames[d.n]
	f.img, pc.img = pc.img, f.img
	f.captureUs = captureUs
	d.n++
}

// flush converts the deferred frames and hands them to f, oldest first, and
// empties d. width and height are the camera's (the size of the scratch).
func (d *deferred) flush(f *predictor.Filler, width, height int) error {
	if d.n == 0 {
		return nil
	}
	if d.bgr.Ptr() == nil {
		d.bgr = gocv.NewMatWithSize(height, width, gocv.MatTypeCV8UC3)
	}
	buf, err := d.bgr.DataPtrUint8()
	if err != nil {
		return fmt.Errorf("relay: conversion buffer: %w", err)
	}
	n := d.n
	d.n = 0
	for i := range n {
		fr := &d.frames[i]
		if err := vp8.I420ToBGR(buf, &fr.img); err != nil {
			return fmt.Errorf("relay: converting a deferred frame to BGR: %w", err)
		}
		if err := f.Hold(d.bgr, fr.captureUs); err != nil {
			return fmt.Errorf("relay: handing a deferred frame to the gap filler: %w", err)
		}
	}
	return nil
}

// newest returns the capture time of the newest deferred frame; ok is false
// when there is none.
func (d *deferred) newest() (us int64, ok bool) {
	if d.n == 0 {
		return 0, false
	}
	return d.frames[d.n-1].captureUs, true
}

// drop forgets the deferred frames (their capture times are on a timeline
// the session left; see pipeline.shift).
func (d *deferred) drop() { d.n = 0 }

// close frees the scratch.
func (d *deferred) close() {
	if d.bgr.Ptr() != nil {
		d.bgr.Close()
	}
}
