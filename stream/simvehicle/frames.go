package simvehicle

import (
	"bytes"
	"fmt"
	"image"
	"image/draw"
	_ "image/jpeg" // registers the JPEG decoder
	_ "image/png"  // registers the PNG decoder
	"os"

	"stopgap/stream/vp8"
)

// fullToLimitedY and fullToLimitedC map JFIF full-range YCbCr (JPEG, ITU-T
// T.871) to BT.601 limited range (VP8, RFC 6386 section 9.2):
// Y' = 16 + Y*219/255, C' = 128 + (C-128)*224/255, rounded.
// Worked values: Y 0 -> 16, 255 -> 235; C 0 -> 16, 128 -> 128, 255 -> 240.
type rangeLUT struct{ y, c [256]byte }

func newRangeLUT() *rangeLUT {
	var t rangeLUT
	for i := range 256 {
		t.y[i] = byte((16*255 + i*219 + 127) / 255)
		v := 128*255 + (i-128)*224
		t.c[i] = byte((v + 127) / 255)
	}
	return &t
}

// frameLoader turns image files into I420 pictures of one size. It keeps its
// scratch buffers between calls; not safe for concurrent use.
type frameLoader struct {
	width, height int
	lut           *rangeLUT
	rgba          *image.RGBA
	bgr           []byte
	file          bytes.Buffer
}

func newFrameLoader(width, height int) *frameLoader {
	return &frameLoader{width: width, height: height, lut: newRangeLUT()}
}

// load reads the image at path into dst (resized to the loader's size).
// JPEGs with 4:2:0 chroma take a direct path; anything else goes through
// RGB and vp8.BGRToI420.
func (f *frameLoader) load(dst *vp8.Image, path string) error {
	fh, err := os.Open(path)
	if err != nil {
		return fmt.Errorf("%w: %w", ErrRecording, err)
	}
	f.file.Reset()
	_, err = f.file.ReadFrom(fh)
	fh.Close()
	if err != nil {
		return fmt.Errorf("%w: read %s: %w", ErrRecording, path, err)
	}
	img, _, err := image.Decode(bytes.NewReader(f.file.Bytes()))
	if err != nil {
		return fmt.Errorf("%w: decode %s: %w (frames must be JPEG or PNG)", ErrRecording, path, err)
	}
	b := img.Bounds()
	if b.Dx() != f.width || b.Dy() != f.height {
		return fmt.Errorf("%w: %s is %dx%d, camera.json says %dx%d", ErrRecording, path, b.Dx(), b.Dy(), f.width, f.height)
	}
	if err := dst.Resize(f.width, f.height); err != nil {
		return fmt.Errorf("%w: %w", ErrRecording, err)
	}
	if yc, ok := img.(*image.YCbCr); ok && yc.SubsampleRatio == image.YCbCrSubsampleRatio420 {
		f.copy420(dst, yc)
		return nil
	}
	if f.rgba == nil {
		f.rgba = image.NewRGBA(image.Rect(0, 0, f.width, f.height))
		f.bgr = make([]byte, f.width*f.height*3)
	}
	draw.Draw(f.rgba, f.rgba.Rect, img, b.Min, draw.Src)
	for i, j := 0, 0; j < len(f.bgr); i, j = i+4, j+3 {
		f.bgr[j], f.bgr[j+1], f.bgr[j+2] = f.rgba.Pix[i+2], f.rgba.Pix[i+1], f.rgba.Pix[i]
	}
	if err := vp8.BGRToI420(dst, f.bgr, f.width, f.height); err != nil {
		return fmt.Errorf("%w: %s: %w", ErrRecording, path, err)
	}
	return nil
}

func (f *frameLoader) copy420(dst *vp8.Image, yc *image.YCbCr) {
	w, h := f.width, f.height
	for r := range h {
		src := yc.Y[r*yc.YStride:]
		src = src[:w]
		d := dst.Y[r*dst.YStride : r*dst.YStride+w]
		for i, v := range src {
			d[i] = f.lut.y[v]
		}
	}
	cw, ch := dst.ChromaWidth(), dst.ChromaHeight()
	for r := range ch {
		su := yc.Cb[r*yc.CStride : r*yc.CStride+cw]
		sv := yc.Cr[r*yc.CStride : r*yc.CStride+cw]
		du := dst.U[r*dst.UVStride : r*dst.UVStride+cw]
		dv := dst.V[r*dst.UVStride : r*dst.UVStride+cw]
		for i := range cw {
			du[i] = f.lut.c[su[i]]
			dv[i] = f.lut.c[sv[i]]
		}
	}
}
