package e2e

import (
	"encoding/base64"
	"errors"
	"fmt"
	"image"
	"image/png"
	"math"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"

	"stopgap/stream/console"
	"stopgap/stream/console/consoletest"
	"stopgap/stream/relay"
	"stopgap/stream/vp8"
	"stopgap/stream/vp8splice"
)

// This file checks the pictures a console viewer shows against the pictures
// the relay meant it to show, frame by frame, around every switch between
// frames passed through from the vehicle and frames of the relay's own
// encoder (stream/passthru, stream/vp8splice). A viewer whose decoder used a
// reference from the other source, or missed the keyframe a switch starts
// with, shows a picture that differs from the relay's by far more than the
// colour conversion does.
//
// What the relay meant the viewer to see, per RTP timestamp of the viewer's
// stream (console.Console.TraceSent):
//   - a forwarded frame: the relay's own decode of the vehicle's frame
//     (relay.Relay.TraceDecoded), which follows the vehicle's whole stream;
//   - an encoded frame: the relay's encoder output as sent to the viewer,
//     decoded here by a decoder that sees no forwarded frame.
//
// What the viewer shows: the page's <video>, drawn to a canvas in a
// requestVideoFrameCallback, whose metadata.rtpTimestamp names the frame
// (WICG video-rvfc). The canvas holds R'G'B'; the luma is recovered with
// the ITU-R BT.601 matrix in studio range (Kr 0.299, Kb 0.114, 219 levels
// from 16: Y = 16 + (65.481 R + 128.553 G + 24.966 B) / 255; coefficients
// as published in BT.601-7, written here from memory), because a VP8 stream
// carries BT.601 YUV (RFC 6386 section 9.2: color space 0, the only one
// defined) and the browser converts with that matrix. The BT.709 and
// full-range alternatives are measured in the same run and logged beside
// it: both fit worse. Clipped pixels are left out (see lumaDiff).

// pixTolerance bounds the difference between the browser's picture and the
// relay's, on 8-bit luma over the pixels the browser did not clip
// (lumaDiff); at most pixMaxClipped of the pixels may be left out, so a
// picture cannot pass by being saturated.
type pixTolerance struct {
	MaxMeanAbs float64 // mean absolute luma difference, levels
	MinPSNR    float64 // dB, peak 255
}

// pixTol is the tolerance, our choice from what correct runs measured:
// 0.13 to 2.4 levels on average (PSNR 35 to 64 dB). A keyframe the browser
// showed at once was mostly within one level (the conversion's rounding;
// saturated label edges are clipped and left out), other frames and a few
// keyframes up to 2.4, with single pixels up to 90 levels at edges in the
// picture: the browser's decoder post-processes its pictures (Chromium's
// WebRTC VP8 decoder turns on libvpx's multi-frame quality enhancement,
// which blends in the previous picture where the quality drops; this is
// from memory of its source and not verified here), so a plain libvpx
// decode is not bit-exact with what it shows.
//
// A decoder that used a reference from the other source differs by far
// more, as two deliberate breakages showed (each with the egress's and the
// splicer's keyframe guards off too): the relay's encoder starting its
// frames without a keyframe, 24 to 37 levels (PSNR 13 to 16 dB); pass-
// through resuming on the vehicle's inter frame, 24 to 26 levels (PSNR
// 16 dB). So does the picture of a neighbouring frame (6 to 12 levels at
// 30 fps on the simulated drive).
var pixTol = pixTolerance{MaxMeanAbs: 3.0, MinPSNR: 32}

const pixMaxClipped = 0.5 // fraction of pixels with a channel at 0 or 255

// pixWindow is how many frames from a switch on are compared: the switch
// frame and those after it, within the same source.
const pixWindow = 6

// pictureLog keeps what the relay sent each viewer and its own decode of
// the vehicle's forwarded frames (tight luma, by the vehicle's RTP
// timestamp).
type pictureLog struct {
	mu      sync.Mutex
	sent    map[uint64][]sentPicture
	decoded map[uint32][]byte
}

// sentPicture is one console.SentFrame, with a copy of the data of an
// encoded frame.
type sentPicture struct {
	num   uint64
	ts    uint32 // viewer's stream
	src   vp8splice.Source
	key   bool
	srcTS uint32 // vehicle's, forwarded frames
	data  []byte // encoded frames
}

// tracePictures installs the relay's and the console's tracers; stop
// removes them.
func tracePictures(r *relay.Relay) *pictureLog {
	l := &pictureLog{sent: map[uint64][]sentPicture{}, decoded: map[uint32][]byte{}}
	r.TraceDecoded(func(f relay.DecodedFrame) {
		if !f.Forwarded {
			return
		}
		y := tightLuma(f.Image)
		l.mu.Lock()
		l.decoded[f.RTPTimestamp] = y
		l.mu.Unlock()
	})
	r.Console().TraceSent(func(f console.SentFrame) {
		p := sentPicture{num: f.Num, ts: f.RTPTimestamp, src: f.Source, key: f.Keyframe, srcTS: f.SourceRTPTimestamp}
		if f.Source == vp8splice.SourceEncoded {
			p.data = append([]byte(nil), f.Frame...)
		}
		l.mu.Lock()
		l.sent[f.Viewer] = append(l.sent[f.Viewer], p)
		l.mu.Unlock()
	})
	return l
}

func (l *pictureLog) stop(r *relay.Relay) {
	r.TraceDecoded(nil)
	r.Console().TraceSent(nil)
}

// viewerFrames returns the frames sent to the viewer that got the most,
// and the number of viewers.
func (l *pictureLog) viewerFrames() ([]sentPicture, int) {
	l.mu.Lock()
	defer l.mu.Unlock()
	var best []sentPicture
	for _, s := range l.sent {
		if len(s) > len(best) {
			best = s
		}
	}
	return append([]sentPicture(nil), best...), len(l.sent)
}

// backOnVehicle reports whether the viewer's frames end with at least n
// forwarded frames after an encoded one: the switch back is done and can be
// compared.
func (l *pictureLog) backOnVehicle(n int) bool {
	s, _ := l.viewerFrames()
	run := 0
	for i := len(s) - 1; i >= 0; i-- {
		if s[i].src != vp8splice.SourceForwarded {
			return run >= n
		}
		run++
	}
	return false
}

// references returns, for each frame sent to the viewer, the luma the
// relay meant it to show (nil if there is none: a forwarded frame the
// relay could not decode), decoding the encoded frames in the order sent.
func (l *pictureLog) references(sent []sentPicture) ([][]byte, error) {
	dec, err := vp8.NewDecoder()
	if err != nil {
		return nil, err
	}
	defer dec.Close()
	var img vp8.Image
	refs := make([][]byte, len(sent))
	l.mu.Lock()
	defer l.mu.Unlock()
	for i, s := range sent {
		if s.src == vp8splice.SourceForwarded {
			refs[i] = l.decoded[s.srcTS]
			continue
		}
		if err := dec.Decode(s.data, &img); err != nil {
			if errors.Is(err, vp8.ErrNotShown) {
				continue
			}
			return nil, fmt.Errorf("the relay's encoded frame %d (RTP %d) does not decode: %w", s.num, s.ts, err)
		}
		refs[i] = tightLuma(&img)
	}
	return refs, nil
}

// tightLuma returns a copy of m's luma plane without row padding.
func tightLuma(m *vp8.Image) []byte {
	y := make([]byte, m.Width*m.Height)
	for row := 0; row < m.Height; row++ {
		copy(y[row*m.Width:(row+1)*m.Width], m.Y[row*m.YStride:])
	}
	return y
}

// pageCaptureJS starts keeping the page's displayed pictures: at each
// requestVideoFrameCallback the <video> is drawn to a canvas at its own
// size and the RGB kept with metadata.rtpTimestamp, the newest maxFrames.
// window.__pix.list() returns [rtpTimestamp, presentedFrames] pairs and
// window.__pix.get(ts) {w, h, rgb: base64} or null.
const pageCaptureJS = `(() => {
  if (window.__pix) return true;
  const maxFrames = 600;
  const video = document.getElementById("video");
  const canvas = document.createElement("canvas");
  const ctx = canvas.getContext("2d", { willReadFrequently: true });
  const frames = [];
  const pix = { evicted: 0, noTimestamp: 0 };
  window.__pix = pix;
  function onFrame(now, md) {
    const w = md.width, h = md.height;
    if (typeof md.rtpTimestamp === "number" && w > 0 && h > 0) {
      if (canvas.width !== w || canvas.height !== h) { canvas.width = w; canvas.height = h; }
      ctx.drawImage(video, 0, 0, w, h);
      const d = ctx.getImageData(0, 0, w, h).data;
      const rgb = new Uint8Array(w * h * 3);
      for (let i = 0, j = 0; i < d.length; i += 4, j += 3) { rgb[j] = d[i]; rgb[j + 1] = d[i + 1]; rgb[j + 2] = d[i + 2]; }
      frames.push({ ts: md.rtpTimestamp >>> 0, presented: md.presentedFrames, w: w, h: h, rgb: rgb });
      if (frames.length > maxFrames) { frames.shift(); pix.evicted++; }
    } else {
      pix.noTimestamp++;
    }
    video.requestVideoFrameCallback(onFrame);
  }
  video.requestVideoFrameCallback(onFrame);
  pix.list = () => frames.map((f) => [f.ts, f.presented]);
  pix.get = (ts) => {
    const f = frames.find((f) => f.ts === ts);
    if (!f) return null;
    let s = "";
    for (let i = 0; i < f.rgb.length; i += 0x8000) s += String.fromCharCode.apply(null, f.rgb.subarray(i, i + 0x8000));
    return { w: f.w, h: f.h, rgb: btoa(s) };
  };
  return true;
})()`

// startPageCapture installs pageCaptureJS in the open page.
func startPageCapture(b *consoletest.Browser) error {
	var ok bool
	if err := b.Eval(pageCaptureJS, &ok); err != nil {
		return err
	}
	if !ok {
		return errors.New("page capture did not start")
	}
	return nil
}

// pagePicture is one picture the page showed.
type pagePicture struct {
	W, H int
	RGB  []byte
}

// pageCapture says which pictures the page kept.
type pageCapture struct {
	// Kept holds the RTP timestamps of the pictures kept.
	Kept map[uint32]bool
	// Presented is the number of frames the video element presented from
	// the first kept picture to the last (a loaded machine calls the frame
	// callback for fewer); Evicted counts pictures dropped for newer ones
	// and NoTimestamp callbacks without metadata.rtpTimestamp.
	Presented, Evicted, NoTimestamp int
}

// pageCaptured returns what the page kept.
func pageCaptured(b *consoletest.Browser) (pageCapture, error) {
	var raw struct {
		List                 [][2]float64
		Evicted, NoTimestamp int
	}
	if err := b.Eval("({list: window.__pix.list(), evicted: window.__pix.evicted, noTimestamp: window.__pix.noTimestamp})", &raw); err != nil {
		return pageCapture{}, err
	}
	c := pageCapture{Kept: make(map[uint32]bool, len(raw.List)), Evicted: raw.Evicted, NoTimestamp: raw.NoTimestamp}
	for _, e := range raw.List {
		c.Kept[uint32(e[0])] = true
	}
	if n := len(raw.List); n > 0 {
		c.Presented = int(raw.List[n-1][1] - raw.List[0][1] + 1)
	}
	return c, nil
}

// pagePictureAt fetches the page's picture with RTP timestamp ts.
func pagePictureAt(b *consoletest.Browser, ts uint32) (pagePicture, error) {
	var raw *struct {
		W, H int
		RGB  string
	}
	if err := b.Eval(fmt.Sprintf("window.__pix.get(%d)", ts), &raw); err != nil {
		return pagePicture{}, err
	}
	if raw == nil {
		return pagePicture{}, fmt.Errorf("the page kept no picture with RTP timestamp %d", ts)
	}
	rgb, err := base64.StdEncoding.DecodeString(raw.RGB)
	if err != nil {
		return pagePicture{}, fmt.Errorf("picture %d: %w", ts, err)
	}
	if raw.W <= 0 || raw.H <= 0 || len(rgb) != raw.W*raw.H*3 {
		return pagePicture{}, fmt.Errorf("picture %d: %dx%d with %d RGB bytes", ts, raw.W, raw.H, len(rgb))
	}
	return pagePicture{W: raw.W, H: raw.H, RGB: rgb}, nil
}

// lumaMatrix turns R'G'B' into Y' (8 bits): Y = Offset + Kr R + Kg G + Kb B.
type lumaMatrix struct {
	Offset     float64
	Kr, Kg, Kb float64
}

// The luma matrices: BT.601 studio range is the one the check uses (see the
// file comment); the others are measured for the log only. Coefficients as
// published in the recommendations, written here from memory.
var (
	// ITU-R BT.601-7: Kr 0.299, Kb 0.114; studio range: 219 levels from 16.
	lumaBT601 = lumaMatrix{16, 0.299 * 219 / 255, 0.587 * 219 / 255, 0.114 * 219 / 255}
	// ITU-R BT.709-6: Kr 0.2126, Kb 0.0722, studio range.
	lumaBT709 = lumaMatrix{16, 0.2126 * 219 / 255, 0.7152 * 219 / 255, 0.0722 * 219 / 255}
	// BT.601 full range (as JPEG/JFIF).
	lumaBT601Full = lumaMatrix{0, 0.299, 0.587, 0.114}
)

// lumaDiff is how far a page picture's luma is from a reference, over the
// pixels where the browser's R'G'B' was not clipped: no channel at 0 or 255.
// There the luma of Y'CbCr -> R'G'B' -> Y' is exact up to rounding,
// whatever the chroma and however the browser upsampled it, because the
// chroma terms of the inverse matrix add nothing to Y';
// where a channel was clipped (saturated label colours next to black, whose
// 4:2:0 chroma is shared) it is not. Both differences are measured against
// the same reference; the check uses the unclipped one.
type lumaDiff struct {
	MeanAbs float64 // mean absolute difference, levels
	PSNR    float64 // dB, peak 255 (+Inf when equal)
	MaxAbs  float64 // largest absolute difference, levels
	Clipped float64 // fraction of pixels left out (a channel at 0 or 255)
	// AllMeanAbs is the mean absolute difference over every pixel,
	// clipped ones included (logged, not checked).
	AllMeanAbs float64
}

func (d lumaDiff) String() string {
	return fmt.Sprintf("mean |dY| %.2f, PSNR %.1f dB, max |dY| %.0f over %.0f %% of the pixels (all pixels: mean |dY| %.2f)",
		d.MeanAbs, d.PSNR, d.MaxAbs, 100*(1-d.Clipped), d.AllMeanAbs)
}

// within reports whether d is inside tolerance tol.
func (d lumaDiff) within(tol pixTolerance) bool {
	return d.Clipped <= pixMaxClipped && d.MeanAbs <= tol.MaxMeanAbs && d.PSNR >= tol.MinPSNR
}

// compareLuma compares p's luma (through m) with ref, w x h tight.
func compareLuma(p pagePicture, ref []byte, m lumaMatrix) (lumaDiff, error) {
	if len(ref) != p.W*p.H {
		return lumaDiff{}, fmt.Errorf("page picture %dx%d, reference has %d samples", p.W, p.H, len(ref))
	}
	var sumAbs, sumSq, maxAbs, allAbs float64
	n := 0
	for i, r := range ref {
		c := p.RGB[3*i : 3*i+3]
		y := m.Offset + m.Kr*float64(c[0]) + m.Kg*float64(c[1]) + m.Kb*float64(c[2])
		d := math.Abs(y - float64(r))
		allAbs += d
		if c[0] == 0 || c[0] == 255 || c[1] == 0 || c[1] == 255 || c[2] == 0 || c[2] == 255 {
			continue
		}
		n++
		sumAbs += d
		sumSq += d * d
		maxAbs = max(maxAbs, d)
	}
	d := lumaDiff{MaxAbs: maxAbs, PSNR: math.Inf(1), Clipped: 1 - float64(n)/float64(len(ref)), AllMeanAbs: allAbs / float64(len(ref))}
	if n > 0 {
		d.MeanAbs = sumAbs / float64(n)
		if sumSq > 0 {
			d.PSNR = 10 * math.Log10(255*255/(sumSq/float64(n)))
		}
	}
	return d, nil
}

// switchCheck is the comparison at one switch of source.
type switchCheck struct {
	What string // "join: forwarded", "forwarded -> encoded", ...
	RTP  uint32 // viewer's RTP timestamp of the switch frame
	Key  bool   // the switch frame is a keyframe
	// Shown counts the frames of the window the page kept, Matched those
	// within the tolerance of their own picture, Mistimed those that were
	// another frame's picture (see nearNeighbour).
	Shown, Matched, Mistimed int
	// FirstAt is the offset from the switch of the first matched frame
	// (-1: none) and First its difference; Worst is the largest
	// difference of the matched frames.
	FirstAt     int
	First       lumaDiff
	Worst       lumaDiff
	Alt709      float64 // mean |dY| of the first matched frame through BT.709
	AltFull     float64 // ... through BT.601 full range
	Failures    []string
	toEncoder   bool // the switch is to the relay's encoder
	fromJoining bool // the viewer's first frame
}

// verified reports whether the page showed at least one frame of the
// switch's window with its own picture and none with a wrong one.
func (c *switchCheck) verified() bool { return c.Matched > 0 && len(c.Failures) == 0 }

// checkSwitchPictures compares the page's pictures with the relay's for
// pixWindow frames from each switch of source in the viewer's stream (and
// from its first frame). A switch whose frames the page did not keep (a
// loaded machine paints fewer frames than it decodes, and the page keeps
// the newest only) is reported but not verified; a picture that is no
// picture the relay sent is a failure.
func checkSwitchPictures(t *testing.T, b *consoletest.Browser, l *pictureLog) []switchCheck {
	t.Helper()
	sent, viewers := l.viewerFrames()
	if viewers != 1 {
		t.Logf("pixels: %d viewers traced; checking the one sent the most frames", viewers)
	}
	if len(sent) == 0 {
		t.Error("pixels: no frame was sent to the page")
		return nil
	}
	for i := 1; i < len(sent); i++ {
		if sent[i].num != sent[i-1].num+1 {
			t.Logf("pixels: frames %d..%d not sent to the viewer (waiting for a keyframe or a full queue)", sent[i-1].num+1, sent[i].num-1)
		}
	}
	refs, err := l.references(sent)
	if err != nil {
		t.Errorf("pixels: %v", err)
		return nil
	}
	pc, err := pageCaptured(b)
	if err != nil {
		t.Errorf("pixels: %v", err)
		return nil
	}
	shown := pc.Kept
	inPage := 0
	for _, s := range sent {
		if shown[s.ts] {
			inPage++
		}
	}
	t.Logf("pixels: %d frames sent to the page, %d of them kept by its frame callback (%d presented over the kept span, %d dropped for newer ones, %d callbacks without an RTP timestamp)",
		len(sent), inPage, pc.Presented, pc.Evicted, pc.NoTimestamp)

	var checks []switchCheck
	for i := range sent {
		c := switchCheck{RTP: sent[i].ts, Key: sent[i].key, FirstAt: -1}
		switch {
		case i == 0:
			c.What, c.fromJoining = "join: "+sent[i].src.String(), true
		case sent[i].src != sent[i-1].src:
			c.What = sent[i-1].src.String() + " -> " + sent[i].src.String()
			c.toEncoder = sent[i].src == vp8splice.SourceEncoded
		default:
			continue
		}
		for k := 0; k < pixWindow && i+k < len(sent); k++ {
			s := sent[i+k]
			if k > 0 && s.src != sent[i].src {
				break
			}
			if shown[s.ts] {
				c.Shown++
				comparePicture(t, b, &c, k, s, refs, i+k)
			}
		}
		checks = append(checks, c)
	}
	return checks
}

// comparePicture compares the page's picture of frame j (sent[j] = s, the
// switch's frame +k) with the relay's and records the outcome in c.
func comparePicture(t *testing.T, b *consoletest.Browser, c *switchCheck, k int, s sentPicture, refs [][]byte, j int) {
	t.Helper()
	if refs[j] == nil {
		c.Failures = append(c.Failures, fmt.Sprintf("frame +%d (RTP %d): no picture of the relay to compare with", k, s.ts))
		return
	}
	p, err := pagePictureAt(b, s.ts)
	if err == nil {
		var d lumaDiff
		if d, err = compareLuma(p, refs[j], lumaBT601); err == nil {
			tol := pixTol
			if !d.within(tol) {
				if n, nd, ok := nearNeighbour(p, refs, j); ok {
					c.Mistimed++
					t.Logf("pixels: the page's picture at RTP %d (%v from its own) is the relay's frame %+d (%v): drawn under the wrong timestamp, not compared", s.ts, d, n, nd)
					return
				}
				writeMismatch(t, s.ts, p, refs[j])
				c.Failures = append(c.Failures, fmt.Sprintf("frame +%d (RTP %d, %s, keyframe %v): %v, tolerance mean |dY| <= %.1f and PSNR >= %.0f dB%s",
					k, s.ts, s.src, s.key, d, tol.MaxMeanAbs, tol.MinPSNR, earlierMatch(p, refs, j)))
				return
			}
			if c.FirstAt < 0 {
				c.FirstAt, c.First = k, d
				a, _ := compareLuma(p, refs[j], lumaBT709)
				f, _ := compareLuma(p, refs[j], lumaBT601Full)
				c.Alt709, c.AltFull = a.MeanAbs, f.MeanAbs
			}
			if c.Matched == 0 || d.MeanAbs > c.Worst.MeanAbs {
				c.Worst = d
			}
			c.Matched++
			return
		}
	}
	c.Failures = append(c.Failures, err.Error())
}

// reportSwitchPictures logs one line per switch, fails t for each failure,
// and fails it unless, with requireBoth, at least one switch each way was
// verified.
func reportSwitchPictures(t *testing.T, checks []switchCheck, requireBoth bool) {
	t.Helper()
	var toEnc, toFwd, verEnc, verFwd int
	for _, c := range checks {
		var sb strings.Builder
		fmt.Fprintf(&sb, "pixels: %s at RTP %d (keyframe %v): page kept %d of the window, %d matched, %d drawn under the wrong timestamp",
			c.What, c.RTP, c.Key, c.Shown, c.Matched, c.Mistimed)
		if c.FirstAt >= 0 {
			fmt.Fprintf(&sb, "; first matched +%d: %v; worst: %v; first through BT.709 mean |dY| %.2f, through BT.601 full range %.2f",
				c.FirstAt, c.First, c.Worst, c.Alt709, c.AltFull)
		}
		t.Log(sb.String())
		for _, f := range c.Failures {
			t.Errorf("pixels: %s at RTP %d: %s", c.What, c.RTP, f)
		}
		if c.fromJoining {
			continue
		}
		if c.toEncoder {
			toEnc++
			if c.verified() {
				verEnc++
			}
		} else {
			toFwd++
			if c.verified() {
				verFwd++
			}
		}
	}
	t.Logf("pixels: %d switches to the relay's encoder (%d verified), %d back to pass-through (%d verified)", toEnc, verEnc, toFwd, verFwd)
	if requireBoth && (verEnc < 1 || verFwd < 1) {
		t.Errorf("pixels: verified %d switches to the relay's encoder and %d back to pass-through, want at least 1 each", verEnc, verFwd)
	}
}

// nearNeighbour reports whether p is, within the tolerance, the relay's
// picture of one of the two frames sent after frame j, and which one (the
// offset) with its difference. A page picture drawn after the video
// element had moved on to a later frame (the frame callback and the drawing
// race on a loaded machine) is such a picture. Earlier frames do not
// count: a decoder that applied an inter frame to the other source's
// reference shows a picture close to the last one before the switch, which
// is exactly the failure this check is for.
func nearNeighbour(p pagePicture, refs [][]byte, j int) (int, lumaDiff, bool) {
	for _, n := range []int{j + 1, j + 2} {
		if n >= len(refs) || refs[n] == nil {
			continue
		}
		if d, err := compareLuma(p, refs[n], lumaBT601); err == nil && d.within(pixTol) {
			return n - j, d, true
		}
	}
	return 0, lumaDiff{}, false
}

// writeMismatch saves the page's picture, the relay's luma and their
// difference (128 = equal) as PNGs in the artefact directory.
func writeMismatch(t *testing.T, ts uint32, p pagePicture, ref []byte) {
	t.Helper()
	page := image.NewRGBA(image.Rect(0, 0, p.W, p.H))
	want := image.NewGray(image.Rect(0, 0, p.W, p.H))
	diff := image.NewGray(image.Rect(0, 0, p.W, p.H))
	m := lumaBT601
	for i := 0; i < p.W*p.H; i++ {
		c := p.RGB[3*i:]
		page.Pix[4*i], page.Pix[4*i+1], page.Pix[4*i+2], page.Pix[4*i+3] = c[0], c[1], c[2], 255
		want.Pix[i] = ref[i]
		y := m.Offset + m.Kr*float64(c[0]) + m.Kg*float64(c[1]) + m.Kb*float64(c[2])
		diff.Pix[i] = uint8(max(0, min(255, math.Round(128+y-float64(ref[i])))))
	}
	dir := consoletest.ArtifactDir(t)
	for name, img := range map[string]image.Image{"page": page, "relay": want, "diff": diff} {
		path := filepath.Join(dir, fmt.Sprintf("pixels-%d-%s.png", ts, name))
		f, err := os.Create(path)
		if err != nil {
			t.Log(err)
			return
		}
		err = png.Encode(f, img)
		if cerr := f.Close(); err == nil {
			err = cerr
		}
		if err != nil {
			t.Log(err)
		}
	}
	t.Logf("pixels: mismatch at RTP %d saved as %s", ts, filepath.Join(dir, fmt.Sprintf("pixels-%d-*.png", ts)))
}

// earlierMatch describes which of the two frames sent before frame j p is
// the picture of, if any: the mark of a decoder that kept showing (or
// barely changed) an earlier picture.
func earlierMatch(p pagePicture, refs [][]byte, j int) string {
	for _, n := range []int{j - 1, j - 2} {
		if n < 0 || refs[n] == nil {
			continue
		}
		if d, err := compareLuma(p, refs[n], lumaBT601); err == nil && d.within(pixTol) {
			return fmt.Sprintf("; it is the relay's picture of frame %+d (%v)", n-j, d)
		}
	}
	return ""
}
