package recording

import (
	"errors"
	"fmt"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"sync"
)

// Header lines written by the [Writer]. Every file carries all its optional
// columns; values not known are left blank.
const (
	framesHeader    = "index,t_capture_us,file,rtp_timestamp\n"
	telemetryHeader = "t_us,speed_mps,yaw_rate_rps,accel_mps2,steer_rad,t_arrival_us\n"
	arrivalsHeader  = "index,t_arrival_us,t_deadline_us,t_capture_us,rtp_timestamp\n"
	truthHeader     = "index,t_capture_us,x_m,y_m,yaw_rad,speed_mps,yaw_rate_rps\n"
)

// Writer appends to a new recording directory so that whatever is on disk
// when the process dies can be read by [Open] up to the last complete frame.
//
// Durability: camera.json is written to a temporary file, synced and renamed.
// Each frame image is written to a temporary file, synced and renamed to
// frames/NNNNNN.<ext>, the directory is synced, and only then is the
// frames.csv line appended, with a single write. CSV lines are not synced
// one by one (the page cache survives a killed process; after a power loss
// the last lines may be lost, which Open tolerates); [Writer.Close] syncs
// them. If a write fails part-way the file is truncated back to its previous
// length so no half line stays behind.
//
// A Writer is safe for concurrent use. The zero value is not usable; call
// [Create].
type Writer struct {
	mu        sync.Mutex
	dir       string
	framesDir string
	frames    *os.File
	telemetry *os.File
	arrivals  *os.File // created by the first WriteArrival
	truth     *os.File // created by the first WriteTruth
	captureUs []int64  // capture time of each written frame
	arrived   []bool   // per frame: an arrival row was written
	lastTelUs int64
	haveTel   bool
	nTruth    int
	line      []byte // reused line buffer
	closed    bool
}

// Create makes dir (and parents) if needed and starts a recording in it. It
// fails with [ErrExists] if dir already holds camera.json or frames.csv. The
// camera must pass Camera.Validate (the complete level, mount included).
func Create(dir string, cam Camera) (*Writer, error) {
	js, err := encodeCamera(cam)
	if err != nil {
		return nil, fmt.Errorf("recording: create %s: %w", dir, err)
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, fmt.Errorf("recording: create: %w", err)
	}
	for _, name := range []string{CameraFile, FramesFile} {
		if _, err := os.Stat(filepath.Join(dir, name)); err == nil {
			return nil, fmt.Errorf("recording: create %s: %w", dir, ErrExists)
		} else if !errors.Is(err, fs.ErrNotExist) {
			return nil, fmt.Errorf("recording: create: %w", err)
		}
	}
	w := &Writer{dir: dir, framesDir: filepath.Join(dir, FramesDir)}
	if err := writeFileAtomic(dir, CameraFile, js); err != nil {
		return nil, fmt.Errorf("recording: create: %w", err)
	}
	if err := os.MkdirAll(w.framesDir, 0o755); err != nil {
		return nil, fmt.Errorf("recording: create: %w", err)
	}
	if w.frames, err = createCSV(dir, FramesFile, framesHeader); err != nil {
		return nil, err
	}
	if w.telemetry, err = createCSV(dir, TelemetryFile, telemetryHeader); err != nil {
		w.frames.Close()
		return nil, err
	}
	if err := syncDir(dir); err != nil {
		w.frames.Close()
		w.telemetry.Close()
		return nil, fmt.Errorf("recording: create: %w", err)
	}
	return w, nil
}

// Dir returns the recording directory.
func (w *Writer) Dir() string { return w.dir }

// WriteFrame stores one encoded image (e.g. JPEG or PNG bytes; the Writer
// does not look inside) as frames/NNNNNN.<ext> and appends its frames.csv
// line. index must be the number of frames written so far (0, 1, 2, ...) and
// captureUs must exceed the previous frame's; otherwise it fails with
// [ErrOrder] and writes nothing. ext is a short alphanumeric extension such
// as "jpg" (a leading dot is ignored). The caller keeps ownership of
// encodedImage.
func (w *Writer) WriteFrame(index int, captureUs int64, encodedImage []byte, ext string) error {
	return w.writeFrame(index, captureUs, 0, false, encodedImage, ext)
}

// WriteFrameRTP is WriteFrame plus the RTP timestamp (90 kHz) the frame
// was sent with (column rtp_timestamp), as a vehicle's onboard recorder
// knows it: it pairs the frame exactly with a session's arrival row.
func (w *Writer) WriteFrameRTP(index int, captureUs int64, rtpTS uint32, encodedImage []byte, ext string) error {
	return w.writeFrame(index, captureUs, rtpTS, true, encodedImage, ext)
}

func (w *Writer) writeFrame(index int, captureUs int64, rtpTS uint32, hasRTP bool, encodedImage []byte, ext string) error {
	w.mu.Lock()
	defer w.mu.Unlock()
	if err := w.checkNextFrame(index, captureUs); err != nil {
		return err
	}
	if len(encodedImage) == 0 {
		return fmt.Errorf("recording: frame %d: %w: empty image", index, ErrValue)
	}
	if len(ext) > 0 && ext[0] == '.' {
		ext = ext[1:]
	}
	if !validExt(ext) {
		return fmt.Errorf("recording: frame %d: %w: extension %q must be 1-8 letters or digits", index, ErrValue, ext)
	}
	name := fmt.Sprintf("%06d.%s", index, ext)
	if err := writeFileAtomic(w.framesDir, name, encodedImage); err != nil {
		return fmt.Errorf("recording: frame %d: %w", index, err)
	}
	return w.appendFrameRow(index, captureUs, FramesDir+"/"+name, rtpTS, hasRTP)
}

// WriteMissingFrame records frame index, expected at captureUs, as one that
// never reached the recorder: a frames.csv row with a blank file field, so a
// replay keeps the tick (and its state) but cannot score it.
func (w *Writer) WriteMissingFrame(index int, captureUs int64) error {
	w.mu.Lock()
	defer w.mu.Unlock()
	if err := w.checkNextFrame(index, captureUs); err != nil {
		return err
	}
	return w.appendFrameRow(index, captureUs, "", 0, false)
}

// checkNextFrame reports whether frame index at captureUs may come next.
// The caller holds w.mu.
func (w *Writer) checkNextFrame(index int, captureUs int64) error {
	if w.closed {
		return ErrClosed
	}
	n := len(w.captureUs)
	if index != n {
		return fmt.Errorf("recording: frame %d: %w: the next frame index is %d", index, ErrOrder, n)
	}
	if n > 0 && captureUs <= w.captureUs[n-1] {
		return fmt.Errorf("recording: frame %d: %w: capture time %d us is not after the previous %d us", index, ErrOrder, captureUs, w.captureUs[n-1])
	}
	return nil
}

// appendFrameRow appends one complete frames.csv line with a single write
// (file and RTP timestamp may be blank) and notes the frame. The caller
// holds w.mu.
func (w *Writer) appendFrameRow(index int, captureUs int64, file string, rtpTS uint32, hasRTP bool) error {
	b := w.line[:0]
	b = strconv.AppendInt(b, int64(index), 10)
	b = append(b, ',')
	b = strconv.AppendInt(b, captureUs, 10)
	b = append(b, ',')
	b = append(b, file...)
	b = append(b, ',')
	if hasRTP {
		b = strconv.AppendUint(b, uint64(rtpTS), 10)
	}
	b = append(b, '\n')
	w.line = b
	if err := appendLine(w.frames, b); err != nil {
		return fmt.Errorf("recording: frame %d: %w", index, err)
	}
	w.captureUs = append(w.captureUs, captureUs)
	w.arrived = append(w.arrived, false)
	return nil
}

// WriteTelemetry appends one telemetry row. TimeUs must exceed the previous
// row's ([ErrOrder]) and every float must be finite ([ErrValue]); fields
// whose Has* flag is false are written blank.
func (w *Writer) WriteTelemetry(s TelemetryRow) error {
	w.mu.Lock()
	defer w.mu.Unlock()
	if w.closed {
		return ErrClosed
	}
	if w.haveTel && s.TimeUs <= w.lastTelUs {
		return fmt.Errorf("recording: telemetry at %d us: %w: not after the previous sample at %d us", s.TimeUs, ErrOrder, w.lastTelUs)
	}
	for _, v := range []float64{s.SpeedMps, s.YawRateRps, s.AccelMps2, s.SteerRad} {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("recording: telemetry at %d us: %w: %v is not finite", s.TimeUs, ErrValue, v)
		}
	}
	b := w.line[:0]
	b = strconv.AppendInt(b, s.TimeUs, 10)
	b = append(b, ',')
	b = strconv.AppendFloat(b, s.SpeedMps, 'g', -1, 64)
	b = append(b, ',')
	b = strconv.AppendFloat(b, s.YawRateRps, 'g', -1, 64)
	b = append(b, ',')
	if s.HasAccel {
		b = strconv.AppendFloat(b, s.AccelMps2, 'g', -1, 64)
	}
	b = append(b, ',')
	if s.HasSteer {
		b = strconv.AppendFloat(b, s.SteerRad, 'g', -1, 64)
	}
	b = append(b, ',')
	if s.HasArrival {
		b = strconv.AppendInt(b, s.ArrivalUs, 10)
	}
	b = append(b, '\n')
	w.line = b
	if err := appendLine(w.telemetry, b); err != nil {
		return fmt.Errorf("recording: telemetry at %d us: %w", s.TimeUs, err)
	}
	w.lastTelUs, w.haveTel = s.TimeUs, true
	return nil
}

// WriteArrival appends one arrivals.csv row (created on first use). The
// frame must already be written and have no arrival yet ([ErrOrder]).
// arrived=false records that the frame never reached the receiver and
// leaves t_arrival_us blank.
func (w *Writer) WriteArrival(index int, arrivalUs int64, arrived bool) error {
	return w.WriteArrivalRow(Arrival{Index: index, ArrivalUs: arrivalUs, Arrived: arrived})
}

// WriteArrivalDeadline is WriteArrival plus the receiver-clock deadline of
// the frame's display tick (column t_deadline_us), which lets a replay
// reproduce the live schedule exactly.
func (w *Writer) WriteArrivalDeadline(index int, arrivalUs int64, arrived bool, deadlineUs int64) error {
	return w.WriteArrivalRow(Arrival{Index: index, ArrivalUs: arrivalUs, Arrived: arrived, DeadlineUs: deadlineUs, HasDeadline: true})
}

// WriteArrivalRow appends one arrivals.csv row with every column the
// Arrival has: t_arrival_us (blank unless Arrived), t_deadline_us (if
// HasDeadline), rtp_timestamp (if HasRTP) and t_capture_us, which is always
// the written frame's capture time (a.CaptureUs is ignored). The same
// order rules as WriteArrival apply.
func (w *Writer) WriteArrivalRow(a Arrival) error {
	index, arrivalUs, arrived := a.Index, a.ArrivalUs, a.Arrived
	w.mu.Lock()
	defer w.mu.Unlock()
	if w.closed {
		return ErrClosed
	}
	if index < 0 || index >= len(w.captureUs) {
		return fmt.Errorf("recording: arrival of frame %d: %w: write the frame first (%d frames written)", index, ErrOrder, len(w.captureUs))
	}
	if w.arrived[index] {
		return fmt.Errorf("recording: arrival of frame %d: %w: already written", index, ErrOrder)
	}
	if w.arrivals == nil {
		f, err := createCSV(w.dir, ArrivalsFile, arrivalsHeader)
		if err != nil {
			return err
		}
		w.arrivals = f
	}
	b := w.line[:0]
	b = strconv.AppendInt(b, int64(index), 10)
	b = append(b, ',')
	if arrived {
		b = strconv.AppendInt(b, arrivalUs, 10)
	}
	b = append(b, ',')
	if a.HasDeadline {
		b = strconv.AppendInt(b, a.DeadlineUs, 10)
	}
	b = append(b, ',')
	b = strconv.AppendInt(b, w.captureUs[index], 10)
	b = append(b, ',')
	if a.HasRTP {
		b = strconv.AppendUint(b, uint64(a.RTPTimestamp), 10)
	}
	b = append(b, '\n')
	w.line = b
	if err := appendLine(w.arrivals, b); err != nil {
		return fmt.Errorf("recording: arrival of frame %d: %w", index, err)
	}
	w.arrived[index] = true
	return nil
}

// WriteTruth appends one truth.csv row (created on first use). Rows must
// follow the written frames in order: t.Index is the number of truth rows so
// far, that frame must be written, and t.CaptureUs must equal its capture
// time ([ErrOrder]). Floats must be finite ([ErrValue]).
func (w *Writer) WriteTruth(t Truth) error {
	w.mu.Lock()
	defer w.mu.Unlock()
	if w.closed {
		return ErrClosed
	}
	if t.Index != w.nTruth || t.Index >= len(w.captureUs) {
		return fmt.Errorf("recording: truth of frame %d: %w: next truth row is for frame %d, %d frames written", t.Index, ErrOrder, w.nTruth, len(w.captureUs))
	}
	if t.CaptureUs != w.captureUs[t.Index] {
		return fmt.Errorf("recording: truth of frame %d: %w: capture time %d us, the frame's is %d us", t.Index, ErrOrder, t.CaptureUs, w.captureUs[t.Index])
	}
	vals := [...]float64{t.XM, t.YM, t.YawRad, t.SpeedMps, t.YawRateRps}
	for _, v := range vals {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("recording: truth of frame %d: %w: %v is not finite", t.Index, ErrValue, v)
		}
	}
	if w.truth == nil {
		f, err := createCSV(w.dir, TruthFile, truthHeader)
		if err != nil {
			return err
		}
		w.truth = f
	}
	b := w.line[:0]
	b = strconv.AppendInt(b, int64(t.Index), 10)
	b = append(b, ',')
	b = strconv.AppendInt(b, t.CaptureUs, 10)
	for _, v := range vals {
		b = append(b, ',')
		b = strconv.AppendFloat(b, v, 'g', -1, 64)
	}
	b = append(b, '\n')
	w.line = b
	if err := appendLine(w.truth, b); err != nil {
		return fmt.Errorf("recording: truth of frame %d: %w", t.Index, err)
	}
	w.nTruth++
	return nil
}

// Frames returns the number of frames written.
func (w *Writer) Frames() int {
	w.mu.Lock()
	defer w.mu.Unlock()
	return len(w.captureUs)
}

// Close syncs and closes all files. It returns the first error; later calls
// return [ErrClosed].
func (w *Writer) Close() error {
	w.mu.Lock()
	defer w.mu.Unlock()
	if w.closed {
		return ErrClosed
	}
	w.closed = true
	var first error
	for _, f := range []*os.File{w.frames, w.telemetry, w.arrivals, w.truth} {
		if f == nil {
			continue
		}
		if err := f.Sync(); err != nil && first == nil {
			first = err
		}
		if err := f.Close(); err != nil && first == nil {
			first = err
		}
	}
	if err := syncDir(w.dir); err != nil && first == nil {
		first = err
	}
	if first != nil {
		return fmt.Errorf("recording: close: %w", first)
	}
	return nil
}

// createCSV creates a new CSV file (failing if it exists) in append mode and
// writes its header with one synced write.
func createCSV(dir, name, header string) (*os.File, error) {
	f, err := os.OpenFile(filepath.Join(dir, name), os.O_WRONLY|os.O_CREATE|os.O_EXCL|os.O_APPEND, 0o644)
	if err != nil {
		if errors.Is(err, fs.ErrExist) {
			return nil, fmt.Errorf("recording: %s: %w", name, ErrExists)
		}
		return nil, fmt.Errorf("recording: %w", err)
	}
	if _, err := f.Write([]byte(header)); err != nil {
		f.Close()
		return nil, fmt.Errorf("recording: %s: %w", name, err)
	}
	if err := f.Sync(); err != nil {
		f.Close()
		return nil, fmt.Errorf("recording: %s: %w", name, err)
	}
	return f, nil
}

// appendLine writes b with a single write; on a short write it truncates
// the file back to its previous length so no partial line remains.
func appendLine(f *os.File, b []byte) error {
	n, err := f.Write(b)
	if err == nil {
		return nil
	}
	if n > 0 {
		if st, serr := f.Stat(); serr == nil {
			if terr := f.Truncate(st.Size() - int64(n)); terr != nil {
				return fmt.Errorf("%w (and removing the partial line failed: %v)", err, terr)
			}
		}
	}
	return err
}

// writeFileAtomic writes data to dir/name via a synced temporary file and a
// rename, then syncs dir, so dir/name is either absent or complete.
func writeFileAtomic(dir, name string, data []byte) error {
	tmp, err := os.CreateTemp(dir, "."+name+".tmp*")
	if err != nil {
		return err
	}
	tmpName := tmp.Name()
	fail := func(err error) error {
		tmp.Close()
		os.Remove(tmpName)
		return err
	}
	if _, err := tmp.Write(data); err != nil {
		return fail(err)
	}
	if err := tmp.Sync(); err != nil {
		return fail(err)
	}
	if err := tmp.Close(); err != nil {
		os.Remove(tmpName)
		return err
	}
	if err := os.Chmod(tmpName, 0o644); err != nil {
		os.Remove(tmpName)
		return err
	}
	if err := os.Rename(tmpName, filepath.Join(dir, name)); err != nil {
		os.Remove(tmpName)
		return err
	}
	return syncDir(dir)
}

// syncDir fsyncs a directory so renames and creations in it are durable.
func syncDir(dir string) error {
	d, err := os.Open(dir)
	if err != nil {
		return err
	}
	err = d.Sync()
	if cerr := d.Close(); err == nil {
		err = cerr
	}
	return err
}

// validExt reports a 1-8 character alphanumeric file extension.
func validExt(ext string) bool {
	if len(ext) == 0 || len(ext) > 8 {
		return false
	}
	for _, c := range ext {
		if !(c >= 'a' && c <= 'z' || c >= 'A' && c <= 'Z' || c >= '0' && c <= '9') {
			return false
		}
	}
	return true
}
