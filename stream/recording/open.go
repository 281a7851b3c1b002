package recording

import (
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"sort"
)

// File names inside a recording directory.
const (
	CameraFile    = "camera.json"
	FramesFile    = "frames.csv"
	TelemetryFile = "telemetry.csv"
	ArrivalsFile  = "arrivals.csv"
	TruthFile     = "truth.csv"
	FramesDir     = "frames" // where the [Writer] puts frame images
)

// Frame is one row of frames.csv.
type Frame struct {
	Index     int    // 0, 1, 2, ... in capture order
	CaptureUs int64  // capture time on the vehicle clock, microseconds, strictly increasing
	File      string // image file relative to the recording directory, '/'-separated; "" for a video recording
	// NoImage is true for a frame that was expected but never reached the
	// recorder (blank file field, written by the live relay for lost
	// frames): its tick can be replayed, but not scored.
	NoImage bool
	// RTPTimestamp is the RTP timestamp (RFC 3550, 90 kHz for video) the
	// vehicle sent the frame with (optional column rtp_timestamp), valid if
	// HasRTP. It pairs the frame exactly with a session's arrival row (see
	// [PairFrames]).
	RTPTimestamp uint32
	HasRTP       bool
}

// TelemetryRow is one row of telemetry.csv. The Has* flags tell whether an
// optional value was present (column present and field not blank).
type TelemetryRow struct {
	TimeUs     int64   // sample time on the vehicle clock, microseconds, strictly increasing
	SpeedMps   float64 // longitudinal speed, m/s
	YawRateRps float64 // yaw rate, rad/s, positive turns left (ISO 8855)
	AccelMps2  float64 // longitudinal acceleration, m/s^2, valid if HasAccel
	HasAccel   bool
	SteerRad   float64 // front-wheel steering angle, rad, positive left, valid if HasSteer
	HasSteer   bool
	ArrivalUs  int64 // arrival time on the receiver clock, microseconds, valid if HasArrival
	HasArrival bool
}

// Arrival is one row of arrivals.csv: when a frame reached the receiver.
type Arrival struct {
	Index     int   // frame index
	ArrivalUs int64 // arrival time on the receiver clock, microseconds, valid if Arrived
	Arrived   bool  // false: the frame never arrived (blank t_arrival_us)
	// DeadlineUs is the receiver-clock time of the frame's display tick
	// (optional column t_deadline_us, written by the live relay), valid if
	// HasDeadline. A replay uses it instead of estimating the schedule, so
	// it reproduces the live LIVE/missing decisions exactly.
	DeadlineUs  int64
	HasDeadline bool
	// CaptureUs is the capture time of the frame the row describes, on the
	// vehicle clock (optional column t_capture_us, written by the live
	// relay: for a frame that never arrived, the capture time its display
	// tick expected), valid if HasCapture. It lets the arrivals be paired
	// with another recording of the same drive ([PairFrames]).
	CaptureUs  int64
	HasCapture bool
	// RTPTimestamp is the RTP timestamp the frame arrived with (optional
	// column rtp_timestamp; blank for a frame that never arrived), valid if
	// HasRTP.
	RTPTimestamp uint32
	HasRTP       bool
}

// Truth is one row of truth.csv: the exact vehicle state at a frame's
// capture time, in a fixed world frame equal to the vehicle frame at the
// start of the drive (ISO 8855 axes).
type Truth struct {
	Index      int     // frame index
	CaptureUs  int64   // equal to the frame's CaptureUs
	XM, YM     float64 // vehicle origin position, metres
	YawRad     float64 // heading, rad, counter-clockwise from world +x
	SpeedMps   float64 // longitudinal speed, m/s
	YawRateRps float64 // yaw rate, rad/s, positive left
}

// Recording is a recording directory read by [Open].
type Recording struct {
	Dir       string         // directory as given to Open
	Camera    Camera         // camera.json
	Frames    []Frame        // frames.csv, Frames[i].Index == i
	Telemetry []TelemetryRow // telemetry.csv, strictly increasing TimeUs
	Arrivals  []Arrival      // arrivals.csv in file order; nil if the file is absent
	Truth     []Truth        // truth.csv, Truth[i].Index == i; nil if absent; may be shorter than Frames after a crash
	VideoFile string         // "video.<ext>" when frames.csv has no file column, else ""

	// Warnings lists what Open tolerated: unknown columns, incomplete last
	// lines dropped, rows beyond the last frame dropped. Callers should log
	// them.
	Warnings []string
	// DroppedLines counts incomplete last lines dropped (at most one per file).
	DroppedLines int
}

// Open reads the recording in dir strictly. Problems in a file are reported
// as a [*ParseError] naming the file, line and column. See the package
// documentation for the format and the single tolerance for crashed writers.
func Open(dir string) (*Recording, error) {
	r := &Recording{Dir: dir}
	read := func(name string, required bool) ([]byte, error) {
		path := filepath.Join(dir, name)
		b, err := os.ReadFile(path)
		if errors.Is(err, fs.ErrNotExist) {
			if !required {
				return nil, nil
			}
			return nil, &ParseError{File: path, Err: fmt.Errorf("%w: %s; is %s a recording directory?", ErrMissingFile, name, dir)}
		}
		if err != nil {
			return nil, fmt.Errorf("recording: %w", err)
		}
		return b, nil
	}
	path := func(name string) string { return filepath.Join(dir, name) }

	b, err := read(CameraFile, true)
	if err != nil {
		return nil, err
	}
	if r.Camera, err = decodeCamera(path(CameraFile), b); err != nil {
		return nil, err
	}

	if b, err = read(FramesFile, true); err != nil {
		return nil, err
	}
	fr, err := decodeFrames(path(FramesFile), b, func(rel string) error { return checkFrameFile(dir, rel) })
	if err != nil {
		return nil, err
	}
	r.Frames = fr.frames
	r.addWarnings(fr.warns, fr.dropped)
	if !fr.hasFiles {
		if r.VideoFile, err = findVideo(dir); err != nil {
			return nil, &ParseError{File: path(FramesFile), Line: 1, Err: err}
		}
	}

	if b, err = read(TelemetryFile, true); err != nil {
		return nil, err
	}
	tel, warns, dropped, err := decodeTelemetry(path(TelemetryFile), b)
	if err != nil {
		return nil, err
	}
	r.Telemetry = tel
	r.addWarnings(warns, dropped)

	if b, err = read(ArrivalsFile, false); err != nil {
		return nil, err
	} else if b != nil {
		arr, warns, dropped, err := decodeArrivals(path(ArrivalsFile), b, len(r.Frames), true)
		if err != nil {
			return nil, err
		}
		r.Arrivals = arr
		r.addWarnings(warns, dropped)
	}

	if b, err = read(TruthFile, false); err != nil {
		return nil, err
	} else if b != nil {
		tr, warns, dropped, err := decodeTruth(path(TruthFile), b, r.Frames, true)
		if err != nil {
			return nil, err
		}
		r.Truth = tr
		r.addWarnings(warns, dropped)
	}
	return r, nil
}

// addWarnings appends warnings and counts dropped lines.
func (r *Recording) addWarnings(w []string, dropped bool) {
	if dropped {
		r.DroppedLines++
	}
	r.Warnings = append(r.Warnings, w...)
}

// ReadArrivals reads a standalone arrivals file (header index,t_arrival_us;
// blank t_arrival_us = never arrived). Indices are not checked against any
// recording; use [Recording.LoadArrivals] for that. Having no warnings
// channel, it treats an incomplete last line as an error rather than
// dropping it.
func ReadArrivals(path string) ([]Arrival, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("recording: reading arrivals: %w", err)
	}
	arr, _, _, err := decodeArrivals(path, b, -1, false)
	return arr, err
}

// LoadArrivals reads a standalone arrivals file, checks every index against
// r.Frames (an unknown index is a [*ParseError] wrapping [ErrUnknownIndex])
// and on success replaces r.Arrivals.
func (r *Recording) LoadArrivals(path string) error {
	b, err := os.ReadFile(path)
	if err != nil {
		return fmt.Errorf("recording: reading arrivals: %w", err)
	}
	arr, warns, _, err := decodeArrivals(path, b, len(r.Frames), false)
	if err != nil {
		return err
	}
	r.Arrivals = arr
	r.Warnings = append(r.Warnings, warns...)
	return nil
}

// FramePath returns the path of frame i's image file (Dir joined with the
// file column). It fails with [ErrNoFrames] for a video recording or an
// index out of range.
func (r *Recording) FramePath(i int) (string, error) {
	if i < 0 || i >= len(r.Frames) {
		return "", fmt.Errorf("recording: frame %d: %w (the recording has %d frames)", i, ErrNoFrames, len(r.Frames))
	}
	if r.Frames[i].NoImage {
		return "", fmt.Errorf("recording: frame %d: %w (it never reached the recorder)", i, ErrNoImage)
	}
	if r.Frames[i].File == "" {
		return "", fmt.Errorf("recording: frame %d: %w (frames are in %s)", i, ErrNoFrames, r.VideoFile)
	}
	return filepath.Join(r.Dir, filepath.FromSlash(r.Frames[i].File)), nil
}

// checkFrameFile reports whether rel names a non-empty regular file in dir.
func checkFrameFile(dir, rel string) error {
	st, err := os.Stat(filepath.Join(dir, filepath.FromSlash(rel)))
	switch {
	case errors.Is(err, fs.ErrNotExist):
		return errors.New("file does not exist")
	case err != nil:
		return err
	case !st.Mode().IsRegular():
		return errors.New("not a regular file")
	case st.Size() == 0:
		return errors.New("file is empty")
	}
	return nil
}

// findVideo returns the single video.<ext> file in dir.
func findVideo(dir string) (string, error) {
	m, err := filepath.Glob(filepath.Join(dir, "video.*"))
	if err != nil {
		return "", err
	}
	var names []string
	for _, p := range m {
		if st, err := os.Stat(p); err == nil && st.Mode().IsRegular() {
			names = append(names, filepath.Base(p))
		}
	}
	sort.Strings(names)
	switch len(names) {
	case 1:
		return names[0], nil
	case 0:
		return "", fmt.Errorf("%w: frames.csv has no %q column, so the directory needs a video.<ext> file; add one or a file column", ErrVideo, colFile)
	default:
		return "", fmt.Errorf("%w: found %v; keep exactly one", ErrVideo, names)
	}
}
