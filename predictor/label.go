package predictor

import (
	"fmt"
	"image"
	"image/color"
	"math"
	"strconv"
	"strings"
	"unsafe"

	"gocv.io/x/gocv"

	"stopgap/internal/vocab"
)

// Label look. Our own choice of colours and pattern:
//
//   - PREDICTED: a border of diagonal amber and black stripes, and in the top
//     left corner inside it a black box with amber text
//     "PREDICTED  picture age <age> ms  conf <confidence>" over
//     "moving objects not shown" (the words come from package vocab).
//   - STALE: the image is desaturated and dimmed to half brightness (done by
//     the Filler), a solid red border, and a red box in the middle with white
//     text "STALE - NOT LIVE" over "picture age <age> ms".
//   - No picture yet: dark grey frame, red border, "NO PICTURE YET"
//     (vocab.NoPicture in upper case).
//
// The border is BorderPx(height) wide: 1/40 of the image height, at least 3
// px (18 px at 720p). The colour values below are read-only.
var (
	amberBGR   = [3]byte{0, 176, 255}
	stripeDark = [3]byte{0, 0, 0}
	amber      = color.RGBA{R: 255, G: 176, B: 0, A: 255}
	black      = color.RGBA{A: 255}
	red        = color.RGBA{R: 220, A: 255}
	white      = color.RGBA{R: 255, G: 255, B: 255, A: 255}
)

// noPictureText is the line of a NO_PICTURE frame, made once.
var noPictureText = strings.ToUpper(vocab.NoPicture)

// BorderPx returns the label border width for an image of the given height.
func BorderPx(height int) int {
	return max(3, int(math.Round(float64(height)/40)))
}

// Labeler draws state labels into frames of one size. It owns a
// precomputed stripe pattern; Close frees it. Not safe for concurrent use.
type Labeler struct {
	w, h, bw int
	pattern  gocv.Mat // full-size stripe image; only its border is used
	text     [128]byte
	scale    float64
	thick    int
	lineH    int // text line height including the descender
	capH     int // height above the baseline
	closed   bool
	lastBox  image.Rectangle // the text box of the last label drawn
}

// NewLabeler prepares labels for width x height CV_8UC3 frames.
func NewLabeler(width, height int) (*Labeler, error) {
	if width <= 0 || height <= 0 || width > MaxImageSide || height > MaxImageSide {
		return nil, fmt.Errorf("label size %dx%d, want 1..%d per side: %w", width, height, MaxImageSide, ErrInvalidConfig)
	}
	bw := BorderPx(height)
	if 2*bw >= width || 2*bw >= height {
		return nil, fmt.Errorf("image %dx%d is too small for a %d px label border: %w", width, height, bw, ErrInvalidConfig)
	}
	l := &Labeler{w: width, h: height, bw: bw}
	l.scale = math.Max(0.3, 0.8*float64(height)/720)
	l.thick = max(1, int(math.Round(2*float64(height)/720)))
	// OpenCV's text height depends on font and scale only, not on the
	// string, so it is measured once here; per label only widths are asked
	// (GetTextSizeWithBaseline would heap-allocate its out parameter).
	sz, base := gocv.GetTextSizeWithBaseline("Ag", gocv.FontHersheySimplex, l.scale, l.thick)
	l.capH, l.lineH = sz.Y, sz.Y+base
	l.pattern = gocv.NewMatWithSize(height, width, gocv.MatTypeCV8UC3)
	p, err := l.pattern.DataPtrUint8()
	if err != nil {
		l.pattern.Close()
		return nil, err
	}
	half := max(3, 2*bw/3)
	for y := 0; y < height; y++ {
		for x := 0; x < width; x++ {
			c := stripeDark
			if ((x+y)/half)%2 == 0 {
				c = amberBGR
			}
			i := 3 * (y*width + x)
			p[i], p[i+1], p[i+2] = c[0], c[1], c[2]
		}
	}
	return l, nil
}

// Close frees the pattern. Safe to call more than once.
func (l *Labeler) Close() error {
	if !l.closed {
		l.closed = true
		l.pattern.Close()
	}
	return nil
}

// borderRects are the four border strips, not overlapping.
func (l *Labeler) borderRects() [4]image.Rectangle {
	w, h, b := l.w, l.h, l.bw
	return [4]image.Rectangle{
		image.Rect(0, 0, w, b), image.Rect(0, h-b, w, h),
		image.Rect(0, b, b, h-b), image.Rect(w-b, b, w, h-b),
	}
}

func (l *Labeler) borderArea() int { return l.w*l.h - (l.w-2*l.bw)*(l.h-2*l.bw) }

// inner is the area inside the border.
func (l *Labeler) inner() image.Rectangle {
	return image.Rect(l.bw, l.bw, l.w-l.bw, l.h-l.bw)
}

// Draw labels img (CV_8UC3, the Labeler's size) in place for state st and
// returns the fraction of the image's pixels the label overwrote (border and
// text box). It refuses StateLive and invalid states: live frames are never
// labelled. Draw does not desaturate; Filler does that for STALE.
func (l *Labeler) Draw(img *gocv.Mat, st State, ageMs, confidence float64) (float64, error) {
	if l.closed {
		return 0, ErrClosed
	}
	if err := checkFrame("labelled frame", img, l.w, l.h); err != nil {
		return 0, err
	}
	var covered int
	switch st {
	case StatePredicted:
		for _, r := range l.borderRects() {
			src := l.pattern.Region(r)
			dst := img.Region(r)
			src.CopyTo(&dst)
			src.Close()
			dst.Close()
		}
		t := append(l.text[:0], StatePredicted.String()...)
		t = vocab.AppendAge(append(t, "  "...), ageMs)
		t = append(t, "  conf "...)
		t = strconv.AppendFloat(t, confidence, 'f', 2, 64)
		covered = l.borderArea() + l.box(img, false, black, amber, bytesString(t), vocab.MovingNotShown)
	case StateStale:
		l.solidBorder(img, red)
		t := vocab.AppendAge(l.text[:0], ageMs)
		covered = l.borderArea() + l.box(img, true, red, white, "STALE - NOT LIVE", bytesString(t))
	default:
		return 0, fmt.Errorf("no label for state %v: live frames are never labelled: %w", st, ErrInvalidConfig)
	}
	return float64(covered) / float64(l.w*l.h), nil
}

// DrawNoPicture fills img with a dark grey "no picture yet" frame with a red
// border and returns the label's pixel share.
func (l *Labeler) DrawNoPicture(img *gocv.Mat) (float64, error) {
	if l.closed {
		return 0, ErrClosed
	}
	if err := checkFrame("labelled frame", img, l.w, l.h); err != nil {
		return 0, err
	}
	img.SetTo(gocv.NewScalar(48, 48, 48, 0))
	l.solidBorder(img, red)
	covered := l.borderArea() + l.box(img, true, red, white, noPictureText, "")
	return float64(covered) / float64(l.w*l.h), nil
}

func (l *Labeler) solidBorder(img *gocv.Mat, c color.RGBA) {
	s := gocv.NewScalar(float64(c.B), float64(c.G), float64(c.R), 0)
	for _, r := range l.borderRects() {
		dst := img.Region(r)
		dst.SetTo(s)
		dst.Close()
	}
}

// box draws one or two lines of text on a filled box, in the top left corner
// inside the border or centred, clipped to the inside of the border. Text is
// drawn through a view of the box, so nothing outside the box changes. It
// returns the box area in pixels.
func (l *Labeler) box(img *gocv.Mat, centred bool, bg, fg color.RGBA, line1, line2 string) int {
	font := gocv.FontHersheySimplex
	lineH := l.lineH
	tw, th := gocv.GetTextSize(line1, font, l.scale, l.thick).X, lineH
	if line2 != "" {
		s2 := gocv.GetTextSize(line2, font, l.scale, l.thick)
		tw = max(tw, s2.X)
		th += lineH + lineH/2
	}
	pad := max(2, lineH/3)
	bw, bh := tw+2*pad, th+2*pad
	in := l.inner()
	var r image.Rectangle
	if centred {
		c := image.Pt((in.Min.X+in.Max.X)/2, (in.Min.Y+in.Max.Y)/2)
		r = image.Rect(c.X-bw/2, c.Y-bh/2, c.X-bw/2+bw, c.Y-bh/2+bh)
	} else {
		m := l.bw / 2
		r = image.Rect(in.Min.X+m, in.Min.Y+m, in.Min.X+m+bw, in.Min.Y+m+bh)
	}
	r = r.Intersect(in)
	l.lastBox = r
	if r.Empty() {
		return 0
	}
	roi := img.Region(r)
	defer roi.Close()
	roi.SetTo(gocv.NewScalar(float64(bg.B), float64(bg.G), float64(bg.R), 0))
	gocv.PutTextWithParams(&roi, line1, image.Pt(pad, pad+l.capH), font, l.scale, fg, l.thick, gocv.LineAA, false)
	if line2 != "" {
		gocv.PutTextWithParams(&roi, line2, image.Pt(pad, pad+l.capH+lineH+lineH/2), font, l.scale, fg, l.thick, gocv.LineAA, false)
	}
	return r.Dx() * r.Dy()
}

// bytesString views b as a string without copying. Only for strings handed
// straight to OpenCV, which copies them; b must not change meanwhile.
func bytesString(b []byte) string {
	if len(b) == 0 {
		return ""
	}
	return unsafe.String(&b[0], len(b))
}
