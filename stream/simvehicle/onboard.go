package simvehicle

import (
	"fmt"
	"io"
	"log/slog"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"sync/atomic"

	"stopgap/stream/recording"
)

// DefaultOnboardQueue is how many frames and telemetry rows an Onboard
// recorder holds waiting for the disk (about two seconds of 30 fps video
// with 100 Hz telemetry); beyond it items are dropped and counted, never
// delaying playback.
const DefaultOnboardQueue = 512

// Onboard is the vehicle's own recording of its drive, as vehicles in the
// trade keep on board: every frame the camera captured, at full quality and
// before encoding (the drive's image file, copied byte for byte), with its
// capture time on the vehicle clock and the RTP timestamp it was sent with
// (rtp_timestamp; blank for a frame the vehicle never sent), and every
// telemetry sample the vehicle published (without arrival times). It is a
// recording directory in the stopgap/stream/recording format, so a live
// session's arrivals can be replayed on it (recording.PairFrames).
//
// Writes happen on the Onboard's own goroutine through a bounded queue;
// a full queue drops the item (counted in OnboardStats). Create it with
// NewOnboard, hand it to Config.Onboard, and Close it after Run returns.
type Onboard struct {
	w    *recording.Writer
	log  *slog.Logger
	ch   chan onboardItem
	done chan struct{}
	once sync.Once
	mu   sync.Mutex // guards closed against concurrent sends
	shut bool

	frames, telemetry, dropped, failed atomic.Uint64
	closeErr                           error
}

type onboardItem struct {
	frame     bool
	path      string // frame: source image file
	captureUs int64
	rtpTS     uint32
	hasRTP    bool
	tel       recording.TelemetryRow
}

// OnboardStats are an Onboard's counters.
type OnboardStats struct {
	// Frames and Telemetry count rows written; Dropped items not written
	// because the queue was full; Failed items whose write failed (logged).
	Frames, Telemetry, Dropped, Failed uint64
}

// NewOnboard creates the onboard recording in dir (a new recording
// directory, see recording.Create) for camera cam. queue <= 0 means
// DefaultOnboardQueue; log nil discards warnings.
func NewOnboard(dir string, cam recording.Camera, queue int, log *slog.Logger) (*Onboard, error) {
	if queue <= 0 {
		queue = DefaultOnboardQueue
	}
	if log == nil {
		log = slog.New(slog.NewTextHandler(io.Discard, nil))
	}
	w, err := recording.Create(dir, cam)
	if err != nil {
		return nil, fmt.Errorf("simvehicle: onboard recording: %w", err)
	}
	o := &Onboard{w: w, log: log, ch: make(chan onboardItem, queue), done: make(chan struct{})}
	go o.loop()
	return o, nil
}

// Dir returns the recording directory.
func (o *Onboard) Dir() string { return o.w.Dir() }

// Stats returns a snapshot of the counters.
func (o *Onboard) Stats() OnboardStats {
	return OnboardStats{Frames: o.frames.Load(), Telemetry: o.telemetry.Load(), Dropped: o.dropped.Load(), Failed: o.failed.Load()}
}

// frame queues one captured frame: the image file at path, captured at
// captureUs (vehicle clock, Unix µs), sent with rtpTS if hasRTP.
func (o *Onboard) frame(path string, captureUs int64, rtpTS uint32, hasRTP bool) {
	o.send(onboardItem{frame: true, path: path, captureUs: captureUs, rtpTS: rtpTS, hasRTP: hasRTP})
}

// sample queues one published telemetry sample.
func (o *Onboard) sample(row recording.TelemetryRow) { o.send(onboardItem{tel: row}) }

func (o *Onboard) send(it onboardItem) {
	o.mu.Lock()
	defer o.mu.Unlock()
	if o.shut {
		o.dropped.Add(1)
		return
	}
	select {
	case o.ch <- it:
	default:
		o.dropped.Add(1)
	}
}

func (o *Onboard) loop() {
	defer close(o.done)
	n := 0
	for it := range o.ch {
		if !it.frame {
			if err := o.w.WriteTelemetry(it.tel); err != nil {
				o.fail("telemetry", err)
				continue
			}
			o.telemetry.Add(1)
			continue
		}
		img, err := os.ReadFile(it.path)
		if err != nil {
			o.fail("frame", err)
			continue
		}
		ext := strings.TrimPrefix(filepath.Ext(it.path), ".")
		if it.hasRTP {
			err = o.w.WriteFrameRTP(n, it.captureUs, it.rtpTS, img, ext)
		} else {
			err = o.w.WriteFrame(n, it.captureUs, img, ext)
		}
		if err != nil {
			o.fail("frame", err)
			continue
		}
		n++
		o.frames.Add(1)
	}
}

func (o *Onboard) fail(what string, err error) {
	o.failed.Add(1)
	o.log.Warn("onboard recording: write failed", "what", what, "err", err)
}

// Close writes what is queued, finishes the recording and returns the first
// error closing it. Later items are dropped; later calls return the same.
func (o *Onboard) Close() error {
	o.once.Do(func() {
		o.mu.Lock()
		o.shut = true
		close(o.ch)
		o.mu.Unlock()
		<-o.done
		o.closeErr = o.w.Close()
	})
	return o.closeErr
}
