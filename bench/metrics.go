package bench

import (
	"fmt"
	"image"
	"math"

	"gocv.io/x/gocv"
)

// Metric conventions (all metrics in this file):
//
//   - Everything is computed on luma, never on colour channels. Luma is
//     BT.601 Y' computed in float32 from 8-bit BGR as
//     Y = 0.299 R + 0.587 G + 0.114 B, full range 0..255, with no rounding
//     and no studio-range offset. BGRA ignores alpha. 8-bit gray input is
//     taken as luma unchanged; 32-bit float gray input is taken as luma
//     already on the 0..255 scale.
//   - PSNR uses a peak of 255 over the whole image and is +Inf when the
//     two lumas are identical. Averages over many frames should use
//     CapPSNR (cap at PSNRCapDB); the report accumulators do.
//   - SSIM follows Wang, Bovik, Sheikh, Simoncelli, "Image quality
//     assessment: from error visibility to structural similarity", IEEE
//     TIP 13(4), 2004: 11x11 circular-symmetric Gaussian window with
//     sigma 1.5 (normalised to sum 1), K1 = 0.01, K2 = 0.03, L = 255,
//     population (not sample) statistics, mean of the SSIM map over the
//     'valid' window positions only, i.e. the map is cropped by 5 pixels
//     on every side before averaging. That is the region the MATLAB code
//     published with the paper averages over (filter2 'valid'), and the
//     crop scikit-image's structural_similarity applies; no automatic
//     downsampling is done. Border extrapolation (OpenCV's default
//     reflect-101) therefore never affects the result.
//   - MAE is the mean absolute luma difference in 8-bit levels.
const (
	// PSNRPeak is the peak signal value used by PSNR (8-bit).
	PSNRPeak = 255.0
	// PSNRCapDB is the value CapPSNR substitutes for PSNR values above it,
	// including +Inf for identical images, so that means stay finite.
	// 100 dB corresponds to an MSE of 6.5e-6 levels², far below any
	// difference that 8-bit images can show, so the cap never hides a
	// real error.
	PSNRCapDB = 100.0
	// SSIMWindow is the side of the Gaussian SSIM window in pixels.
	SSIMWindow = 11
	// SSIMSigma is the standard deviation of the SSIM window in pixels.
	SSIMSigma = 1.5
	// SSIMK1 and SSIMK2 are the SSIM stabilising constants of the paper.
	SSIMK1 = 0.01
	SSIMK2 = 0.03

	lumaR = 0.299
	lumaG = 0.587
	lumaB = 0.114

	ssimC1 = (SSIMK1 * PSNRPeak) * (SSIMK1 * PSNRPeak)
	ssimC2 = (SSIMK2 * PSNRPeak) * (SSIMK2 * PSNRPeak)
)

// CapPSNR returns db, or PSNRCapDB if db is larger (including +Inf).
// NaN is returned unchanged so that callers can still tell "not scored".
func CapPSNR(db float64) float64 {
	if db > PSNRCapDB {
		return PSNRCapDB
	}
	return db
}

// Scores holds the three metrics of one image pair.
type Scores struct {
	// PSNRdB is the peak signal-to-noise ratio in dB; +Inf if identical.
	PSNRdB float64
	// SSIM is the mean structural similarity, in [-1, 1], 1 if identical.
	SSIM float64
	// MAE is the mean absolute luma difference in 8-bit levels (0..255).
	MAE float64
}

// Scorer computes PSNR, SSIM and MAE between two images of the same
// size. It owns float32 scratch Mats that are allocated on first use and
// reused while the image size stays the same, so scoring a stream of
// equally sized frames does not allocate per call.
//
// The zero value is ready to use. Call Close when done to free the
// scratch memory (it lives in OpenCV, outside the Go heap). A Scorer must
// not be used by several goroutines at once. Input Mats are only read and
// stay owned by the caller.
type Scorer struct {
	ya, yb     gocv.Mat // luma of a and b; blurred in place to mu_a, mu_b
	aa, bb, ab gocv.Mat // products; blurred in place to E[aa], E[bb], E[ab]
	tmp        gocv.Mat // continuous copy of a non-continuous input
	rows, cols int      // size of the scratch Mats; 0 when not allocated
	hasTmp     bool
}

// NewScorer returns a Scorer; equivalent to new(Scorer).
func NewScorer() *Scorer { return new(Scorer) }

// Close frees the scratch Mats. The Scorer may be used again afterwards;
// it reallocates on demand.
func (s *Scorer) Close() error {
	if s.rows != 0 {
		for _, m := range []*gocv.Mat{&s.ya, &s.yb, &s.aa, &s.bb, &s.ab} {
			m.Close()
		}
		s.rows, s.cols = 0, 0
	}
	if s.hasTmp {
		s.tmp.Close()
		s.hasTmp = false
	}
	return nil
}

// Score computes all three metrics of a against b. See the package
// conventions above for luma, borders and PSNR of identical images.
func (s *Scorer) Score(a, b gocv.Mat) (Scores, error) {
	return s.score(a, b, true)
}

// PSNR returns the peak signal-to-noise ratio of a against b in dB
// (+Inf for identical lumas). It skips the SSIM filtering.
func (s *Scorer) PSNR(a, b gocv.Mat) (float64, error) {
	r, err := s.score(a, b, false)
	return r.PSNRdB, err
}

// MAE returns the mean absolute luma difference of a and b in 8-bit
// levels. It skips the SSIM filtering.
func (s *Scorer) MAE(a, b gocv.Mat) (float64, error) {
	r, err := s.score(a, b, false)
	return r.MAE, err
}

// SSIM returns the mean SSIM of a against b over the valid window
// positions.
func (s *Scorer) SSIM(a, b gocv.Mat) (float64, error) {
	r, err := s.score(a, b, true)
	return r.SSIM, err
}

// Luma writes the BT.601 luma of src into dst as a continuous CV_32FC1
// Mat of the same size (reallocating dst only when its size or type is
// wrong). dst is owned by the caller. src may be 8-bit BGR, BGRA or gray,
// or float32 gray (copied).
func Luma(dst *gocv.Mat, src gocv.Mat) error {
	if err := checkImage("image", src); err != nil {
		return err
	}
	rows, cols := src.Rows(), src.Cols()
	if dst.Ptr() == nil || dst.Rows() != rows || dst.Cols() != cols || dst.Type() != gocv.MatTypeCV32FC1 || !dst.IsContinuous() {
		if dst.Ptr() != nil {
			dst.Close()
		}
		*dst = gocv.NewMatWithSize(rows, cols, gocv.MatTypeCV32FC1)
	}
	var tmp gocv.Mat
	var hasTmp bool
	defer func() {
		if hasTmp {
			tmp.Close()
		}
	}()
	return lumaInto(*dst, src, &tmp, &hasTmp)
}

func checkImage(which string, m gocv.Mat) error {
	if m.Ptr() == nil || m.Empty() || m.Rows() == 0 || m.Cols() == 0 {
		return fmt.Errorf("%w: %s has no pixels; pass a decoded frame", ErrEmptyImage, which)
	}
	switch m.Type() {
	case gocv.MatTypeCV8UC3, gocv.MatTypeCV8UC4, gocv.MatTypeCV8UC1, gocv.MatTypeCV32FC1:
		return nil
	}
	return fmt.Errorf("%w: %s has type %v; convert to 8-bit BGR, BGRA or gray, or float32 gray first",
		ErrImageType, which, m.Type())
}

// ensure (re)allocates the five scratch planes for rows x cols.
func (s *Scorer) ensure(rows, cols int) {
	if s.rows == rows && s.cols == cols {
		return
	}
	if s.rows != 0 {
		for _, m := range []*gocv.Mat{&s.ya, &s.yb, &s.aa, &s.bb, &s.ab} {
			m.Close()
		}
	}
	for _, m := range []*gocv.Mat{&s.ya, &s.yb, &s.aa, &s.bb, &s.ab} {
		*m = gocv.NewMatWithSize(rows, cols, gocv.MatTypeCV32FC1)
	}
	s.rows, s.cols = rows, cols
}

func (s *Scorer) score(a, b gocv.Mat, withSSIM bool) (Scores, error) {
	nan := Scores{math.NaN(), math.NaN(), math.NaN()}
	if err := checkImage("first image", a); err != nil {
		return nan, err
	}
	if err := checkImage("second image", b); err != nil {
		return nan, err
	}
	rows, cols := a.Rows(), a.Cols()
	if b.Rows() != rows || b.Cols() != cols {
		return nan, fmt.Errorf("%w: %dx%d vs %dx%d (width x height)", ErrSizeMismatch, cols, rows, b.Cols(), b.Rows())
	}
	if withSSIM && (rows < SSIMWindow || cols < SSIMWindow) {
		return nan, fmt.Errorf("%w: %dx%d, need at least %dx%d", ErrImageTooSmall, cols, rows, SSIMWindow, SSIMWindow)
	}
	s.ensure(rows, cols)
	if err := lumaInto(s.ya, a, &s.tmp, &s.hasTmp); err != nil {
		return nan, err
	}
	if err := lumaInto(s.yb, b, &s.tmp, &s.hasTmp); err != nil {
		return nan, err
	}
	ya, err := s.ya.DataPtrFloat32()
	if err != nil {
		return nan, fmt.Errorf("bench: scratch luma: %w", err)
	}
	yb, err := s.yb.DataPtrFloat32()
	if err != nil {
		return nan, fmt.Errorf("bench: scratch luma: %w", err)
	}
	n := rows * cols
	var out Scores
	var sumSq, sumAbs float64
	if !withSSIM {
		for i, va := range ya[:n] {
			d := float64(va - yb[i])
			sumSq += d * d
			sumAbs += math.Abs(d)
		}
	} else {
		aa, _ := s.aa.DataPtrFloat32()
		bb, _ := s.bb.DataPtrFloat32()
		ab, _ := s.ab.DataPtrFloat32()
		aa, bb, ab, yb = aa[:n], bb[:n], ab[:n], yb[:n]
		// The second moments are taken about a common offset (the mean
		// luma of both images) so that the float32 planes hold small
		// numbers: E[x^2]-mu^2 then loses far fewer digits to
		// cancellation than about zero (values up to 65025).
		var sumA, sumB float64
		for i, va := range ya[:n] {
			sumA += float64(va)
			sumB += float64(yb[i])
		}
		off := float32((sumA + sumB) / float64(2*n))
		for i, va := range ya[:n] {
			vb := yb[i]
			d := float64(va - vb)
			sumSq += d * d
			sumAbs += math.Abs(d)
			ca, cb := va-off, vb-off
			aa[i] = ca * ca
			bb[i] = cb * cb
			ab[i] = ca * cb
		}
		out.SSIM = s.meanSSIM(rows, cols, float64(off))
	}
	mse := sumSq / float64(n)
	out.MAE = sumAbs / float64(n)
	if mse == 0 {
		out.PSNRdB = math.Inf(1)
	} else {
		out.PSNRdB = 10 * math.Log10(PSNRPeak*PSNRPeak/mse)
	}
	if !withSSIM {
		out.SSIM = math.NaN()
	}
	return out, nil
}

// meanSSIM blurs the five planes in place and averages the SSIM map over
// the valid window positions. The product planes hold moments about off.
func (s *Scorer) meanSSIM(rows, cols int, off float64) float64 {
	k := image.Pt(SSIMWindow, SSIMWindow)
	for _, m := range []*gocv.Mat{&s.ya, &s.yb, &s.aa, &s.bb, &s.ab} {
		gocv.GaussianBlur(*m, m, k, SSIMSigma, SSIMSigma, gocv.BorderReflect101)
	}
	mua, _ := s.ya.DataPtrFloat32()
	mub, _ := s.yb.DataPtrFloat32()
	eaa, _ := s.aa.DataPtrFloat32()
	ebb, _ := s.bb.DataPtrFloat32()
	eab, _ := s.ab.DataPtrFloat32()
	const r = SSIMWindow / 2
	var total float64
	for y := r; y < rows-r; y++ {
		lo, hi := y*cols+r, y*cols+cols-r
		ma, mb := mua[lo:hi], mub[lo:hi]
		xa, xb, xab := eaa[lo:hi], ebb[lo:hi], eab[lo:hi]
		var row float64
		for i := range ma {
			m1, m2 := float64(ma[i]), float64(mb[i])
			m11, m22, m12 := m1*m1, m2*m2, m1*m2
			c1, c2 := m1-off, m2-off
			s11 := float64(xa[i]) - c1*c1
			s22 := float64(xb[i]) - c2*c2
			s12 := float64(xab[i]) - c1*c2
			row += ((2*m12 + ssimC1) * (2*s12 + ssimC2)) / ((m11 + m22 + ssimC1) * (s11 + s22 + ssimC2))
		}
		total += row
	}
	return total / float64((rows-2*r)*(cols-2*r))
}

// lumaInto writes the luma of src into dst (continuous CV_32FC1, same
// size). A non-continuous src is first copied into *tmp, which is
// (re)used across calls and flagged in *hasTmp.
func lumaInto(dst, src gocv.Mat, tmp *gocv.Mat, hasTmp *bool) error {
	if !src.IsContinuous() {
		if !*hasTmp {
			*tmp = gocv.NewMat()
			*hasTmp = true
		}
		src.CopyTo(tmp)
		src = *tmp
	}
	out, err := dst.DataPtrFloat32()
	if err != nil {
		return fmt.Errorf("bench: luma destination: %w", err)
	}
	n := src.Rows() * src.Cols()
	out = out[:n]
	switch src.Type() {
	case gocv.MatTypeCV32FC1:
		in, err := src.DataPtrFloat32()
		if err != nil {
			return fmt.Errorf("bench: reading float image: %w", err)
		}
		copy(out, in[:n])
		return nil
	}
	in, err := src.DataPtrUint8()
	if err != nil {
		return fmt.Errorf("bench: reading 8-bit image: %w", err)
	}
	switch src.Type() {
	case gocv.MatTypeCV8UC1:
		for i, v := range in[:n] {
			out[i] = float32(v)
		}
	case gocv.MatTypeCV8UC3:
		in = in[:3*n]
		for i, j := 0, 0; i < len(out) && j+2 < len(in); i, j = i+1, j+3 {
			out[i] = lumaB*float32(in[j]) + lumaG*float32(in[j+1]) + lumaR*float32(in[j+2])
		}
	case gocv.MatTypeCV8UC4:
		in = in[:4*n]
		for i := range out {
			p := in[4*i : 4*i+3 : 4*i+3]
			out[i] = lumaB*float32(p[0]) + lumaG*float32(p[1]) + lumaR*float32(p[2])
		}
	default:
		return fmt.Errorf("%w: %v", ErrImageType, src.Type())
	}
	return nil
}
