package bench

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"

	"gocv.io/x/gocv"

	"stopgap/stream/recording"
)

// Example is one tick shown side by side in report.html. The Mats are
// 8-bit BGR (or gray) frames owned by the caller; WriteReport only reads
// them. Rotation may be an empty Mat (gocv.NewMat()) or the zero Mat to
// leave it out.
type Example struct {
	Tick       int     // tick index, used to look up the scores in ticks
	AgeMs      float64 // picture age at the tick, ms
	State      string  // state shown to the operator
	Confidence float64 // predictor confidence, NaN if none
	// True is the recorded frame of the tick (never shown live during a gap).
	True gocv.Mat
	// Hold is the last real frame.
	Hold gocv.Mat
	// Rotation is the rotation-only warp (optional).
	Rotation gocv.Mat
	// Predicted is the frame as displayed, with its label.
	Predicted gocv.Mat
}

// Report file names inside the destination directory.
const (
	SummaryFile   = "summary.json"
	TicksFile     = recording.ReplayTicksFile
	PSNRPlotFile  = "psnr_vs_age.png"
	SSIMPlotFile  = "ssim_vs_age.png"
	HTMLFile      = "report.html"
	ExamplesDir   = "examples"
	reportTmpMark = ".partial-"
)

// ReportWriter writes a replay report directory. The zero value refuses
// to replace an existing non-empty destination.
type ReportWriter struct {
	// Overwrite allows replacing an existing non-empty destination
	// directory. The old directory is removed only after the new one is
	// complete and in place.
	Overwrite bool
	// Title is the page title; empty means "stopgap replay report".
	Title string
	// JPEGQuality is the quality of the example images, 1..100; 0 means 90.
	JPEGQuality int
}

// WriteReport writes a report into dir with the zero ReportWriter (no
// overwrite of a non-empty directory). See ReportWriter.Write.
func WriteReport(dir string, s Summary, ticks []TickRow, examples []Example) error {
	return ReportWriter{}.Write(dir, s, ticks, examples)
}

// Write creates dir holding summary.json, ticks.csv, psnr_vs_age.png,
// ssim_vs_age.png, report.html and examples/tick-NNNNNN-{true,hold,
// rotation,predicted}.jpg.
//
// Everything is first written into a new hidden directory next to dir
// (".<name>.partial-*") that is renamed to dir only when every file is
// complete, so a failed or interrupted run never leaves a directory named
// dir that looks complete; on error the partial directory is removed (a
// crash can leave one behind; it is safe to delete). The parent of dir
// must exist. If dir exists and is not empty, Write fails with
// ErrDestExists unless Overwrite is set; an existing empty directory is
// replaced.
func (w ReportWriter) Write(dir string, s Summary, ticks []TickRow, examples []Example) error {
	return writeDirAtomic(dir, w.Overwrite, "report", func(tmp string) error {
		return w.writeAll(tmp, s, ticks, examples)
	})
}

// writeDirAtomic creates dir by calling fill on a new hidden directory next
// to it (".<name>.partial-*") and renaming that to dir only when fill
// succeeded, so a failed or interrupted run never leaves a directory named
// dir that looks complete; on error the partial directory is removed. The
// parent of dir must exist. An existing non-empty dir is refused with
// ErrDestExists unless overwrite; a replaced dir is swapped out and removed
// only after the new one is in place. what names the output in errors
// ("report", "tune report").
func writeDirAtomic(dir string, overwrite bool, what string, fill func(tmp string) error) (err error) {
	dir = filepath.Clean(dir)
	parent, base := filepath.Dir(dir), filepath.Base(dir)
	if base == "." || base == string(filepath.Separator) {
		return fmt.Errorf("bench: %s destination %q must name a new directory", what, dir)
	}
	if st, serr := os.Stat(parent); serr != nil {
		return fmt.Errorf("bench: %s destination parent %q: %w; create it first", what, parent, serr)
	} else if !st.IsDir() {
		return fmt.Errorf("bench: %s destination parent %q is not a directory", what, parent)
	}
	exists, err := checkDest(dir, overwrite)
	if err != nil {
		return err
	}
	tmp, err := os.MkdirTemp(parent, "."+base+reportTmpMark)
	if err != nil {
		return fmt.Errorf("bench: creating %s directory next to %q: %w", what, dir, err)
	}
	defer func() {
		if err != nil {
			os.RemoveAll(tmp)
		}
	}()
	if err := os.Chmod(tmp, 0o755); err != nil {
		return fmt.Errorf("bench: %s directory: %w", what, err)
	}
	if err := fill(tmp); err != nil {
		return err
	}
	if !exists {
		if err := os.Rename(tmp, dir); err != nil {
			return fmt.Errorf("bench: moving finished %s into place at %q: %w", what, dir, err)
		}
		return nil
	}
	// Swap: old -> backup name, new -> dir, then delete the backup.
	old, err := os.MkdirTemp(parent, "."+base+".old-")
	if err != nil {
		return fmt.Errorf("bench: replacing %q: %w", dir, err)
	}
	if err := os.Remove(old); err != nil { // only the unique name is wanted
		return fmt.Errorf("bench: replacing %q: %w", dir, err)
	}
	if err := os.Rename(dir, old); err != nil {
		return fmt.Errorf("bench: moving old %s %q aside: %w", what, dir, err)
	}
	if err := os.Rename(tmp, dir); err != nil {
		if rerr := os.Rename(old, dir); rerr != nil {
			return fmt.Errorf("bench: moving finished %s into place at %q: %w (old one left at %q: %v)", what, dir, err, old, rerr)
		}
		return fmt.Errorf("bench: moving finished %s into place at %q: %w", what, dir, err)
	}
	if err := os.RemoveAll(old); err != nil {
		return fmt.Errorf("bench: %s written to %q but the old one at %q could not be removed: %w", what, dir, old, err)
	}
	return nil
}

// checkDest reports whether dir exists (as a directory) and whether it
// may be replaced.
func checkDest(dir string, overwrite bool) (bool, error) {
	st, err := os.Stat(dir)
	if errors.Is(err, os.ErrNotExist) {
		return false, nil
	}
	if err != nil {
		return false, fmt.Errorf("bench: report destination %q: %w", dir, err)
	}
	if !st.IsDir() {
		return false, fmt.Errorf("%w: %q is a file; choose another destination", ErrDestExists, dir)
	}
	f, err := os.Open(dir)
	if err != nil {
		return false, fmt.Errorf("bench: report destination %q: %w", dir, err)
	}
	names, err := f.Readdirnames(1)
	f.Close()
	if err != nil && !errors.Is(err, io.EOF) {
		return false, fmt.Errorf("bench: report destination %q: %w", dir, err)
	}
	if len(names) > 0 && !overwrite {
		return false, fmt.Errorf("%w: %q; choose a new directory or ask to overwrite", ErrDestExists, dir)
	}
	return true, nil
}

func (w ReportWriter) writeAll(dir string, s Summary, ticks []TickRow, examples []Example) error {
	if err := writeSummary(filepath.Join(dir, SummaryFile), s); err != nil {
		return err
	}
	if err := writeTicksCSV(filepath.Join(dir, TicksFile), ticks); err != nil {
		return err
	}
	if err := writeAgePlot(filepath.Join(dir, PSNRPlotFile), ticks, s, "PSNR vs picture age",
		fmt.Sprintf("PSNR (dB, capped at %g)", s.cap()), func(sc Scores) float64 { return math.Min(sc.PSNRdB, s.cap()) },
		func(b BucketStats) Float { return b.PSNRdBMean }); err != nil {
		return err
	}
	if err := writeAgePlot(filepath.Join(dir, SSIMPlotFile), ticks, s, "SSIM vs picture age", "SSIM (mean over valid windows)",
		func(sc Scores) float64 { return sc.SSIM }, func(b BucketStats) Float { return b.SSIMMean }); err != nil {
		return err
	}
	if err := writeReliabilityPlot(filepath.Join(dir, ReliabilityPlotFile), s.Calibration, s.CalibrationTruth); err != nil {
		return err
	}
	if err := writeConfidenceScatter(filepath.Join(dir, ConfidencePlotFile), ticks, s.Calibration.ToleranceMrad); err != nil {
		return err
	}
	figs, err := w.writeExamples(dir, ticks, examples)
	if err != nil {
		return err
	}
	return w.writeHTML(filepath.Join(dir, HTMLFile), s, figs)
}

// writeFile writes data through a closure and reports close errors.
func writeFile(path string, fill func(io.Writer) error) error {
	f, err := os.Create(path)
	if err != nil {
		return fmt.Errorf("bench: %w", err)
	}
	if err := fill(f); err != nil {
		f.Close()
		return fmt.Errorf("bench: writing %s: %w", filepath.Base(path), err)
	}
	if err := f.Close(); err != nil {
		return fmt.Errorf("bench: writing %s: %w", filepath.Base(path), err)
	}
	return nil
}

func writeSummary(path string, s Summary) error {
	return writeFile(path, func(w io.Writer) error {
		enc := json.NewEncoder(w)
		enc.SetIndent("", "  ")
		return enc.Encode(s)
	})
}
