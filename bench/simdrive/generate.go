package simdrive

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"

	"gocv.io/x/gocv"

	"stopgap/stream/recording"
)

// Camera returns the camera.json parameters of a drive generated with cfg
// (after defaults): fx = fy = (Width/2) / tan(HFOV/2), principal point at
// the image centre, no distortion, and the configured mounting.
func (c Config) Camera() (recording.Camera, error) {
	c, err := c.withDefaults()
	if err != nil {
		return recording.Camera{}, err
	}
	return c.camera(), nil
}

func (c Config) camera() recording.Camera {
	f := float64(c.Width) / 2 / math.Tan(c.HorizontalFOVDeg/2*math.Pi/180)
	return recording.Camera{
		Width: c.Width, Height: c.Height,
		Fx: f, Fy: f, Cx: float64(c.Width) / 2, Cy: float64(c.Height) / 2,
		HeightM: c.CameraHeightM, PitchDeg: c.CameraPitchDeg, XOffsetM: c.CameraXOffsetM,
	}
}

// Generate renders the drive described by cfg and writes it as a complete
// recording directory at outDir (which must not exist): camera.json,
// frames/NNNNNN.jpg, frames.csv, telemetry.csv and truth.csv. It writes
// into a temporary sibling directory and renames it into place at the end,
// so a failed or cancelled run leaves nothing at outDir. progress, if not
// nil, is called after each frame with the frames done and the total.
func Generate(ctx context.Context, cfg Config, outDir string, progress func(done, total int)) (err error) {
	cfg, err = cfg.withDefaults()
	if err != nil {
		return err
	}
	if _, err := os.Stat(outDir); err == nil {
		return fmt.Errorf("%w: %s", ErrExists, outDir)
	} else if !errors.Is(err, fs.ErrNotExist) {
		return fmt.Errorf("simdrive: %w", err)
	}
	parent := filepath.Dir(filepath.Clean(outDir))
	if err := os.MkdirAll(parent, 0o755); err != nil {
		return fmt.Errorf("simdrive: %w", err)
	}
	tmp, err := os.MkdirTemp(parent, "."+filepath.Base(outDir)+".partial-")
	if err != nil {
		return fmt.Errorf("simdrive: %w", err)
	}
	defer func() {
		if err != nil {
			os.RemoveAll(tmp)
		}
	}()
	recDir := filepath.Join(tmp, "rec")
	cam := cfg.camera()
	w, err := recording.Create(recDir, cam)
	if err != nil {
		return fmt.Errorf("simdrive: %w", err)
	}
	defer func() {
		if cerr := w.Close(); cerr != nil && err == nil && !errors.Is(cerr, recording.ErrClosed) {
			err = fmt.Errorf("simdrive: %w", cerr)
		}
	}()

	tr := newDriveTrajectory(cfg)
	if err := writeTelemetry(w, cfg, tr); err != nil {
		return err
	}
	if err := writeCommands(recDir, cfg, tr); err != nil {
		return err
	}
	if err := ctx.Err(); err != nil {
		return err
	}
	ph := newPinhole(cam)
	sc, err := buildScene(tr, cfg.GroundTexelM, cfg.Width, cfg.Height, ph, cfg.Seed, cfg.FacadeSetbackM)
	if err != nil {
		return err
	}
	defer sc.Close()
	if cfg.Traffic {
		sc.placeTraffic(tr, cfg.DurationS, cfg.Seed)
		if err := os.Mkdir(filepath.Join(recDir, MoverMaskDir), 0o755); err != nil {
			return fmt.Errorf("simdrive: %w", err)
		}
	}
	rd := newRenderer(ph, cfg.Width, cfg.Height, sc)
	defer rd.Close()

	n := cfg.frameCount()
	params := []int{gocv.IMWriteJpegQuality, cfg.JPEGQuality}
	for i := 0; i < n; i++ {
		if err := ctx.Err(); err != nil {
			return err
		}
		us := cfg.captureUs(i)
		pose := tr.PoseAt(us)
		rd.tS = float64(us) * 1e-6
		rd.render(pose)
		if cfg.Traffic {
			if !gocv.IMWrite(MoverMaskPath(recDir, i), rd.movers) {
				return fmt.Errorf("simdrive: frame %d: writing %s failed; check the disk", i, MoverMaskPath(recDir, i))
			}
		}
		buf, err := gocv.IMEncodeWithParams(gocv.JPEGFileExt, rd.frame, params)
		if err != nil {
			return fmt.Errorf("simdrive: frame %d: encode: %w", i, err)
		}
		err = w.WriteFrame(i, us, buf.GetBytes(), "jpg")
		buf.Close()
		if err != nil {
			return fmt.Errorf("simdrive: %w", err)
		}
		ts := float64(us) * 1e-6
		if err := w.WriteTruth(recording.Truth{Index: i, CaptureUs: us, XM: pose.XM, YM: pose.YM, YawRad: pose.YawRad,
			SpeedMps: tr.SpeedMps(ts), YawRateRps: tr.YawRateRps(ts)}); err != nil {
			return fmt.Errorf("simdrive: %w", err)
		}
		if progress != nil {
			progress(i+1, n)
		}
	}
	if err := w.Close(); err != nil {
		return fmt.Errorf("simdrive: %w", err)
	}
	if err := os.Rename(recDir, outDir); err != nil {
		return fmt.Errorf("simdrive: %w", err)
	}
	return os.Remove(tmp)
}

// writeTelemetry writes telemetryRows(cfg, tr).
func writeTelemetry(w *recording.Writer, cfg Config, tr *trajectory) error {
	for k, row := range telemetryRows(cfg, tr) {
		if err := w.WriteTelemetry(row); err != nil {
			return fmt.Errorf("simdrive: telemetry sample %d: %w", k, err)
		}
	}
	return nil
}

// telemetryRows returns samples at TelemetryHz from t = 0 through the end
// of the drive with seeded Gaussian noise (see the package documentation).
func telemetryRows(cfg Config, tr *trajectory) []recording.TelemetryRow {
	rng := rand.New(rand.NewPCG(uint64(cfg.Seed), 0x7e1e))
	endUs := int64(math.Round(cfg.DurationS * 1e6))
	var rows []recording.TelemetryRow
	for k := 0; ; k++ {
		us := int64(math.Round(float64(k) * 1e6 / cfg.TelemetryHz))
		if us > endUs {
			return rows
		}
		ts := float64(us) * 1e-6
		rows = append(rows, recording.TelemetryRow{
			TimeUs:     us,
			SpeedMps:   tr.SpeedMps(ts) + sigma(cfg.SpeedSigmaMps)*rng.NormFloat64(),
			YawRateRps: tr.YawRateRps(ts) + sigma(cfg.YawRateSigmaRps)*rng.NormFloat64(),
			AccelMps2:  tr.AccelMps2(ts) + sigma(cfg.AccelSigmaMps2)*rng.NormFloat64(),
			HasAccel:   true,
			SteerRad:   tr.SteerRad(ts, cfg.WheelbaseM) + sigma(cfg.SteerSigmaRad)*rng.NormFloat64(),
			HasSteer:   true,
		})
	}
}
