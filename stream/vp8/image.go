package vp8

import "fmt"

// Image is an 8-bit planar YUV 4:2:0 picture (I420) in BT.601 limited range
// ("studio swing": Y in 16..235, U and V in 16..240), the colour space of
// VP8 (RFC 6386 section 9.2, color_space = 0).
//
// Plane Y holds Height rows of Width samples, YStride bytes apart. Planes U
// and V hold (Height+1)/2 rows of (Width+1)/2 samples, UVStride bytes apart.
// The zero value is an empty image that Decode and BGRToI420 size on first
// use. An Image owns its planes; the package never keeps references to a
// caller's Image after a call returns.
type Image struct {
	// Width and Height are the picture size in pixels.
	Width, Height int
	// Y, U and V are the luma and chroma planes.
	Y, U, V []byte
	// YStride is the distance in bytes between rows of Y.
	YStride int
	// UVStride is the distance in bytes between rows of U and of V.
	UVStride int
}

// NewImage returns an image of the given size with tightly packed planes
// (YStride = width, UVStride = (width+1)/2), all samples zero.
func NewImage(width, height int) (*Image, error) {
	m := &Image{}
	if err := m.Resize(width, height); err != nil {
		return nil, err
	}
	return m, nil
}

// ChromaWidth returns the width of the U and V planes, (Width+1)/2.
func (m *Image) ChromaWidth() int { return (m.Width + 1) / 2 }

// ChromaHeight returns the height of the U and V planes, (Height+1)/2.
func (m *Image) ChromaHeight() int { return (m.Height + 1) / 2 }

// Resize sets the size to width x height with tightly packed planes,
// reusing the existing plane storage when it is large enough (so it does
// not allocate when the size is unchanged). Sample values are unspecified
// afterwards.
func (m *Image) Resize(width, height int) error {
	if width <= 0 || height <= 0 || width > maxDimension || height > maxDimension {
		return fmt.Errorf("%w: %dx%d, want 1..%d on each side", ErrImageSize, width, height, maxDimension)
	}
	cw, ch := (width+1)/2, (height+1)/2
	m.Width, m.Height = width, height
	m.YStride, m.UVStride = width, cw
	m.Y = grow(m.Y, width*height)
	m.U = grow(m.U, cw*ch)
	m.V = grow(m.V, cw*ch)
	return nil
}

func grow(b []byte, n int) []byte {
	if cap(b) >= n {
		return b[:n]
	}
	return make([]byte, n)
}

// Validate checks that the size is positive and that each plane is long
// enough for its stride and rows.
func (m *Image) Validate() error {
	if m == nil {
		return ErrNilImage
	}
	if m.Width <= 0 || m.Height <= 0 || m.Width > maxDimension || m.Height > maxDimension {
		return fmt.Errorf("%w: %dx%d, want 1..%d on each side", ErrImageSize, m.Width, m.Height, maxDimension)
	}
	cw, ch := m.ChromaWidth(), m.ChromaHeight()
	if m.YStride < m.Width || m.UVStride < cw {
		return fmt.Errorf("%w: strides Y %d UV %d too small for %dx%d", ErrImageSize, m.YStride, m.UVStride, m.Width, m.Height)
	}
	if need := planeLen(m.YStride, m.Width, m.Height); len(m.Y) < need {
		return fmt.Errorf("%w: Y plane has %d bytes, %dx%d with stride %d needs %d", ErrImageSize, len(m.Y), m.Width, m.Height, m.YStride, need)
	}
	need := planeLen(m.UVStride, cw, ch)
	if len(m.U) < need || len(m.V) < need {
		return fmt.Errorf("%w: U/V planes have %d/%d bytes, need %d", ErrImageSize, len(m.U), len(m.V), need)
	}
	return nil
}

// planeLen is the bytes needed for rows rows of w samples stride apart.
func planeLen(stride, w, rows int) int { return stride*(rows-1) + w }

// Fixed-point BT.601 limited-range coefficients, scaled by 2^16.
// Source: ITU-R BT.601-7 clause 2.5.3 (equations from memory):
//
//	Y  = 16  + (65.481 R + 128.553 G + 24.966 B) / 255
//	Cb = 128 + (-37.797 R - 74.203 G + 112.0 B) / 255
//	Cr = 128 + (112.0 R - 93.786 G - 18.214 B) / 255
//
// e.g. 65.481/255 = 0.256788 and 0.256788 * 65536 = 16829. The chroma
// coefficient rows sum to exactly 0 so that grey maps to U = V = 128.
const (
	fixShift = 16
	fixHalf  = 1 << (fixShift - 1)

	yR, yG, yB = 16829, 33039, 6416
	uR, uG, uB = -9714, -19070, 28784
	vR, vG, vB = 28784, -24103, -4681

	// Inverse (same source, inverted): R = 1.164383 (Y-16) + 1.596027 (V-128),
	// G = 1.164383 (Y-16) - 0.391762 (U-128) - 0.812968 (V-128),
	// B = 1.164383 (Y-16) + 2.017232 (U-128).
	cY, crV, cgU, cgV, cbU = 76309, 104597, 25675, 53279, 132201
)

// BGRToI420 converts a packed 8-bit BGR picture (OpenCV's default channel
// order; 3 bytes per pixel, rows width*3 bytes apart, no padding) of
// width x height pixels into dst, resizing dst (see Image.Resize). Chroma is
// the BT.601 conversion of the average colour of each 2x2 block (fewer at
// odd edges). It does not allocate when dst already has room.
func BGRToI420(dst *Image, bgr []byte, width, height int) error {
	if dst == nil {
		return ErrNilImage
	}
	if width <= 0 || height <= 0 || width > maxDimension || height > maxDimension {
		return fmt.Errorf("%w: BGR size %dx%d, want 1..%d on each side", ErrImageSize, width, height, maxDimension)
	}
	if len(bgr) < width*height*3 {
		return fmt.Errorf("%w: BGR buffer has %d bytes, %dx%d needs %d", ErrImageSize, len(bgr), width, height, width*height*3)
	}
	if err := dst.Resize(width, height); err != nil {
		return err
	}
	bgrToI420(dst, bgr)
	return nil
}

// bgrToI420 converts bgr (validated, exactly dst's size) into dst's planes,
// which may have any valid strides (the encoder passes a view of C memory).
// Full 2x2 blocks take a fast path; the odd last column and row reuse the
// general block code. Both compute the same formulas.
func bgrToI420(dst *Image, bgr []byte) {
	w, h := dst.Width, dst.Height
	rowBytes := w * 3
	cw := (w + 1) / 2
	for y := 0; y < h; y += 2 {
		r0 := bgr[y*rowBytes : y*rowBytes+rowBytes]
		y0 := dst.Y[y*dst.YStride : y*dst.YStride+w]
		cy := y / 2
		uRow := dst.U[cy*dst.UVStride : cy*dst.UVStride+cw]
		vRow := dst.V[cy*dst.UVStride : cy*dst.UVStride+cw]
		if y+1 >= h {
			for cx := 0; cx < cw; cx++ {
				bgrBlock(r0, r0, y0, y0, 1, uRow, vRow, cx, w)
			}
			continue
		}
		r1 := bgr[(y+1)*rowBytes : (y+1)*rowBytes+rowBytes]
		y1 := dst.Y[(y+1)*dst.YStride : (y+1)*dst.YStride+w]
		full := w / 2
		for cx := 0; cx < full; cx++ {
			x := cx * 2
			i := x * 3
			p := r0[i : i+6 : i+6]
			q := r1[i : i+6 : i+6]
			b0, g0, rr0 := int32(p[0]), int32(p[1]), int32(p[2])
			b1, g1, rr1 := int32(p[3]), int32(p[4]), int32(p[5])
			b2, g2, rr2 := int32(q[0]), int32(q[1]), int32(q[2])
			b3, g3, rr3 := int32(q[3]), int32(q[4]), int32(q[5])
			ya := y0[x : x+2 : x+2]
			yb := y1[x : x+2 : x+2]
			ya[0] = uint8((yR*rr0 + yG*g0 + yB*b0 + 16<<fixShift + fixHalf) >> fixShift)
			ya[1] = uint8((yR*rr1 + yG*g1 + yB*b1 + 16<<fixShift + fixHalf) >> fixShift)
			yb[0] = uint8((yR*rr2 + yG*g2 + yB*b2 + 16<<fixShift + fixHalf) >> fixShift)
			yb[1] = uint8((yR*rr3 + yG*g3 + yB*b3 + 16<<fixShift + fixHalf) >> fixShift)
			sb, sg, sr := b0+b1+b2+b3, g0+g1+g2+g3, rr0+rr1+rr2+rr3
			uRow[cx] = uint8(divRound(uR*sr+uG*sg+uB*sb, 4<<fixShift) + 128)
			vRow[cx] = uint8(divRound(vR*sr+vG*sg+vB*sb, 4<<fixShift) + 128)
		}
		if full < cw {
			bgrBlock(r0, r1, y0, y1, 2, uRow, vRow, full, w)
		}
	}
}

// bgrBlock converts the (up to) 2x2 block at chroma column cx from rows r0
// and r1 (rows = 1 or 2) of a picture w pixels wide.
func bgrBlock(r0, r1, y0, y1 []byte, rows int, uRow, vRow []byte, cx, w int) {
	x := cx * 2
	var sb, sg, sr, n int32
	for dx := 0; dx < 2 && x+dx < w; dx++ {
		i := (x + dx) * 3
		b, g, r := int32(r0[i]), int32(r0[i+1]), int32(r0[i+2])
		y0[x+dx] = uint8((yR*r + yG*g + yB*b + 16<<fixShift + fixHalf) >> fixShift)
		sb, sg, sr, n = sb+b, sg+g, sr+r, n+1
		if rows == 2 {
			b, g, r = int32(r1[i]), int32(r1[i+1]), int32(r1[i+2])
			y1[x+dx] = uint8((yR*r + yG*g + yB*b + 16<<fixShift + fixHalf) >> fixShift)
			sb, sg, sr, n = sb+b, sg+g, sr+r, n+1
		}
	}
	den := n << fixShift
	uRow[cx] = uint8(divRound(uR*sr+uG*sg+uB*sb, den) + 128)
	vRow[cx] = uint8(divRound(vR*sr+vG*sg+vB*sb, den) + 128)
}

// divRound returns num/den rounded to nearest (den > 0).
func divRound(num, den int32) int32 {
	if num >= 0 {
		return (num + den/2) / den
	}
	return -((-num + den/2) / den)
}

// I420ToBGR converts src into packed 8-bit BGR (3 bytes per pixel, rows
// src.Width*3 bytes apart) in dst[:src.Width*src.Height*3], the layout
// gocv.NewMatFromBytes(h, w, gocv.MatTypeCV8UC3, dst) wraps. dst is owned by
// the caller and must be at least that long. Chroma is replicated over each
// 2x2 block (no interpolation). It does not allocate.
func I420ToBGR(dst []byte, src *Image) error {
	if err := src.Validate(); err != nil {
		return err
	}
	w, h := src.Width, src.Height
	if len(dst) < w*h*3 {
		return fmt.Errorf("%w: BGR buffer has %d bytes, %dx%d needs %d", ErrImageSize, len(dst), w, h, w*h*3)
	}
	cw := src.ChromaWidth()
	full := w / 2
	for y := 0; y < h; y++ {
		yRow := src.Y[y*src.YStride : y*src.YStride+w]
		cy := y / 2
		uRow := src.U[cy*src.UVStride : cy*src.UVStride+cw]
		vRow := src.V[cy*src.UVStride : cy*src.UVStride+cw]
		out := dst[y*w*3 : y*w*3+w*3]
		for cx := 0; cx < full; cx++ {
			d := int32(uRow[cx]) - 128
			e := int32(vRow[cx]) - 128
			rd := crV*e + fixHalf
			gd := -cgU*d - cgV*e + fixHalf
			bd := cbU*d + fixHalf
			x := cx * 2
			yy := yRow[x : x+2 : x+2]
			o := out[x*3 : x*3+6 : x*3+6]
			c := (int32(yy[0]) - 16) * cY
			o[0] = clamp8((c + bd) >> fixShift)
			o[1] = clamp8((c + gd) >> fixShift)
			o[2] = clamp8((c + rd) >> fixShift)
			c = (int32(yy[1]) - 16) * cY
			o[3] = clamp8((c + bd) >> fixShift)
			o[4] = clamp8((c + gd) >> fixShift)
			o[5] = clamp8((c + rd) >> fixShift)
		}
		if full < cw { // odd width: last column
			x := w - 1
			d := int32(uRow[cw-1]) - 128
			e := int32(vRow[cw-1]) - 128
			c := (int32(yRow[x]) - 16) * cY
			o := out[x*3 : x*3+3 : x*3+3]
			o[0] = clamp8((c + cbU*d + fixHalf) >> fixShift)
			o[1] = clamp8((c - cgU*d - cgV*e + fixHalf) >> fixShift)
			o[2] = clamp8((c + crV*e + fixHalf) >> fixShift)
		}
	}
	return nil
}

// clamp8 clamps v to 0..255.
func clamp8(v int32) uint8 {
	if uint32(v) <= 255 {
		return uint8(v)
	}
	if v < 0 {
		return 0
	}
	return 255
}

// copyImage copies src's pixels into dst (sizes equal, both validated).
func copyImage(dst, src *Image) {
	copyPlane(dst.Y, dst.YStride, src.Y, src.YStride, src.Width, src.Height)
	cw, ch := src.ChromaWidth(), src.ChromaHeight()
	copyPlane(dst.U, dst.UVStride, src.U, src.UVStride, cw, ch)
	copyPlane(dst.V, dst.UVStride, src.V, src.UVStride, cw, ch)
}

func copyPlane(dst []byte, dstStride int, src []byte, srcStride, w, h int) {
	if dstStride == w && srcStride == w {
		copy(dst[:w*h], src[:w*h])
		return
	}
	for y := 0; y < h; y++ {
		copy(dst[y*dstStride:y*dstStride+w], src[y*srcStride:y*srcStride+w])
	}
}
