package bench

import (
	"bytes"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strconv"

	"gocv.io/x/gocv"

	"stopgap/internal/vocab"
)

// exampleFig is one image of an example block in the HTML page.
type exampleFig struct {
	File, Caption string
}

// exampleBlock is one example tick in the HTML page.
type exampleBlock struct {
	Heading string
	Figs    []exampleFig
}

func (w ReportWriter) writeExamples(dir string, ticks []TickRow, examples []Example) ([]exampleBlock, error) {
	if len(examples) == 0 {
		return nil, nil
	}
	if err := os.Mkdir(filepath.Join(dir, ExamplesDir), 0o755); err != nil {
		return nil, fmt.Errorf("bench: %w", err)
	}
	q := w.JPEGQuality
	if q <= 0 || q > 100 {
		q = 90
	}
	byTick := make(map[int]*TickRow, len(ticks))
	for i := range ticks {
		byTick[ticks[i].Tick] = &ticks[i]
	}
	var blocks []exampleBlock
	for _, ex := range examples {
		conf := "n/a"
		if !math.IsNaN(ex.Confidence) {
			conf = fmt.Sprintf("%.2f", ex.Confidence)
		}
		blk := exampleBlock{Heading: fmt.Sprintf("Tick %d: %s, shown as %s, confidence %s",
			ex.Tick, vocab.Age(ex.AgeMs), ex.State, conf)}
		row := byTick[ex.Tick]
		for _, part := range []struct {
			name    string
			m       gocv.Mat
			method  Method
			caption string
			must    bool
		}{
			{"true", ex.True, MethodInvalid, "TRUE: recorded frame for this tick (not available live during the gap)", true},
			{"hold", ex.Hold, MethodHold, "HOLD: last real frame repeated", true},
			{"rotation", ex.Rotation, MethodRotation, "ROTATION ONLY: last real frame turned with the camera", false},
			{"predicted", ex.Predicted, MethodPredicted, "PREDICTED: predicted frame as displayed, with its label", true},
		} {
			if part.m.Ptr() == nil || part.m.Empty() {
				if part.must {
					return nil, fmt.Errorf("bench: example for tick %d has no %s image", ex.Tick, part.name)
				}
				continue
			}
			name := fmt.Sprintf("tick-%06d-%s.jpg", ex.Tick, part.name)
			buf, err := gocv.IMEncodeWithParams(gocv.JPEGFileExt, part.m, []int{gocv.IMWriteJpegQuality, q})
			if err != nil {
				return nil, fmt.Errorf("bench: encoding example %s: %w", name, err)
			}
			data := bytes.Clone(buf.GetBytes())
			buf.Close()
			if err := os.WriteFile(filepath.Join(dir, ExamplesDir, name), data, 0o644); err != nil {
				return nil, fmt.Errorf("bench: %w", err)
			}
			caption := part.caption
			if row != nil && part.method != MethodInvalid {
				if sc := row.MethodScores(part.method); !math.IsNaN(sc.SSIM) {
					caption += fmt.Sprintf(" (PSNR %.1f dB, SSIM %.3f)", CapPSNR(sc.PSNRdB), sc.SSIM)
				}
			}
			blk.Figs = append(blk.Figs, exampleFig{File: ExamplesDir + "/" + name, Caption: caption})
		}
		blocks = append(blocks, blk)
	}
	return blocks, nil
}

// fmtFloat formats a summary value for the HTML table.
func fmtFloat(v Float, digits int) string {
	f := float64(v)
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return "n/a"
	}
	return strconv.FormatFloat(f, 'f', digits, 64)
}
