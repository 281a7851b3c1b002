package relay

import (
	"fmt"
	"log/slog"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"sync"
	"sync/atomic"

	"gocv.io/x/gocv"

	"stopgap/internal/display"
	"stopgap/stream/recording"
)

// ShownFile is the file in a recording directory that lists what the relay
// showed, one row per display tick (see recording.ShownFile).
const ShownFile = recording.ShownFile

const ticksHeader = "tick,state,age_ms,confidence,cutoff\n"

// A recorder keeps at most one second of frame copies (FPS frames, at least
// 8) waiting for JPEG encoding; beyond that the recording has fallen behind
// and a frame is recorded as never arrived (counted in record_errors and
// logged), so the recording stays replayable.

// recMsg is one instruction to the recorder goroutine.
type recMsg struct {
	kind       int // recTick, recFrame, recTel, recEnd
	index      int
	captureUs  int64
	deadlineUs int64
	arrivalUs  int64
	rtpTS      uint32
	state      display.State
	ageMs      float64
	confidence float64
	cutoff     float64
	mat        *gocv.Mat // recFrame: a copy owned by the recorder, or nil
	tel        recording.TelemetryRow
}

const (
	recTick = iota + 1
	recFrame
	recTel
	recEnd
)

type pendingRow struct {
	hasTick    bool
	captureUs  int64
	deadlineUs int64
	arrived    bool
	arrivalUs  int64
	rtpTS      uint32
	jpeg       []byte
}

// recorder writes the recording on its own goroutine so JPEG encoding and
// fsyncs never delay the display loop.
type recorder struct {
	cfg   Config
	log   *slog.Logger
	met   *metrics
	w     *recording.Writer
	ticks *os.File
	ch    chan recMsg
	done  chan struct{}
	once  sync.Once

	assigned atomic.Int64 // next recording index to hand out
	mats     atomic.Int64 // frame copies in flight
	maxMats  int64

	// recorder goroutine state
	pending   map[int]*pendingRow
	nextWrite int
	maxFrame  int
	latestUs  int64
	lastTelUs int64
	haveTel   bool
	// warnedTelOrder: an out-of-order telemetry sample was logged.
	warnedTelOrder bool
	lastCapUs      int64
	line           []byte
}

func newRecorder(cfg Config, met *metrics) (*recorder, error) {
	w, err := recording.Create(cfg.RecordDir, cfg.Camera)
	if err != nil {
		return nil, fmt.Errorf("relay: recording: %w", err)
	}
	f, err := os.OpenFile(filepath.Join(cfg.RecordDir, ShownFile), os.O_CREATE|os.O_EXCL|os.O_WRONLY|os.O_APPEND, 0o644)
	if err != nil {
		w.Close()
		return nil, fmt.Errorf("relay: recording: %w; choose a new --record directory", err)
	}
	if _, err := f.WriteString(ticksHeader); err != nil {
		f.Close()
		w.Close()
		return nil, fmt.Errorf("relay: recording: %w", err)
	}
	rc := &recorder{cfg: cfg, log: cfg.Logger.With("component", "recording"), met: met, w: w, ticks: f,
		ch: make(chan recMsg, 1024), done: make(chan struct{}), pending: map[int]*pendingRow{}, maxFrame: -1}
	rc.maxMats = max(8, int64(math.Ceil(cfg.FPS)))
	go rc.loop()
	return rc, nil
}

func (rc *recorder) nextIndex() int { return int(rc.assigned.Load()) }

func (rc *recorder) send(m recMsg) {
	select {
	case rc.ch <- m:
	default:
		rc.met.recordErrors.Add(1)
		if m.mat != nil {
			m.mat.Close()
			rc.mats.Add(-1)
		}
	}
}

func (rc *recorder) tick(index int, captureUs, deadlineUs int64, state display.State, ageMs, confidence, cutoff float64) {
	if index < 0 {
		return
	}
	if int64(index+1) > rc.assigned.Load() {
		rc.assigned.Store(int64(index + 1))
	}
	rc.send(recMsg{kind: recTick, index: index, captureUs: captureUs, deadlineUs: deadlineUs, state: state, ageMs: ageMs, confidence: confidence, cutoff: cutoff})
}

func (rc *recorder) frame(index int, captureUs, arrivalUs int64, rtpTS uint32, img gocv.Mat) {
	if index < 0 {
		return
	}
	m := recMsg{kind: recFrame, index: index, captureUs: captureUs, arrivalUs: arrivalUs, rtpTS: rtpTS}
	if rc.mats.Add(1) <= rc.maxMats {
		c := img.Clone()
		m.mat = &c
	} else {
		rc.mats.Add(-1)
		rc.met.recordErrors.Add(1)
	}
	rc.send(m)
}

func (rc *recorder) telemetry(te telEvent) {
	s := te.sample
	rc.send(recMsg{kind: recTel, tel: recording.TelemetryRow{TimeUs: s.TimeUs, SpeedMps: s.SpeedMps, YawRateRps: s.YawRateRps,
		AccelMps2: s.AccelMps2, HasAccel: s.HasAccel, SteerRad: s.SteerRad, HasSteer: s.HasSteer,
		ArrivalUs: te.arrivalUs, HasArrival: true}})
}

// endSession writes every pending row: frames that have not come will not.
func (rc *recorder) endSession() { rc.send(recMsg{kind: recEnd}) }

// close finishes the recording and returns the first error closing it.
func (rc *recorder) close() error {
	var err error
	rc.once.Do(func() {
		rc.ch <- recMsg{kind: recEnd}
		close(rc.ch)
		<-rc.done
		if e := rc.ticks.Sync(); e != nil {
			err = e
		}
		if e := rc.ticks.Close(); e != nil && err == nil {
			err = e
		}
		if e := rc.w.Close(); e != nil && err == nil {
			err = e
		}
	})
	return err
}

func (rc *recorder) loop() {
	defer close(rc.done)
	for m := range rc.ch {
		switch m.kind {
		case recTick:
			rc.onTick(m)
		case recFrame:
			rc.onFrame(m)
		case recTel:
			rc.onTel(m.tel)
		case recEnd:
			rc.flush(true)
		}
	}
}

func (rc *recorder) row(i int) *pendingRow {
	p := rc.pending[i]
	if p == nil {
		p = &pendingRow{}
		rc.pending[i] = p
	}
	return p
}

func (rc *recorder) onTick(m recMsg) {
	b := rc.line[:0]
	b = strconv.AppendInt(b, int64(m.index), 10)
	b = append(b, ',')
	b = append(b, m.state.String()...)
	b = append(b, ',')
	b = strconv.AppendFloat(b, m.ageMs, 'f', 3, 64)
	b = append(b, ',')
	b = strconv.AppendFloat(b, m.confidence, 'f', 4, 64)
	b = append(b, ',')
	b = strconv.AppendFloat(b, m.cutoff, 'f', 4, 64)
	b = append(b, '\n')
	rc.line = b
	if _, err := rc.ticks.Write(b); err != nil {
		rc.fail(ShownFile, err)
	}
	if m.index < rc.nextWrite {
		return
	}
	p := rc.row(m.index)
	p.hasTick = true
	p.deadlineUs = m.deadlineUs
	if !p.arrived {
		p.captureUs = m.captureUs
	}
	if m.deadlineUs > rc.latestUs {
		rc.latestUs = m.deadlineUs
	}
	rc.flush(false)
}

func (rc *recorder) onFrame(m recMsg) {
	if m.mat != nil {
		defer func() { m.mat.Close(); rc.mats.Add(-1) }()
	}
	if m.index > rc.maxFrame {
		rc.maxFrame = m.index
	}
	if m.arrivalUs > rc.latestUs {
		rc.latestUs = m.arrivalUs
	}
	if m.index < rc.nextWrite {
		return // its row was written as never arrived; too late to record
	}
	p := rc.row(m.index)
	if m.mat == nil {
		rc.log.Warn("recording fell behind: frame recorded as never arrived", "index", m.index)
		rc.flush(false)
		return
	}
	buf, err := gocv.IMEncodeWithParams(gocv.JPEGFileExt, *m.mat, []int{gocv.IMWriteJpegQuality, rc.cfg.RecordQuality})
	if err != nil {
		rc.fail("frame image", err)
		rc.flush(false)
		return
	}
	p.jpeg = append([]byte(nil), buf.GetBytes()...)
	buf.Close()
	p.arrived, p.arrivalUs, p.captureUs, p.rtpTS = true, m.arrivalUs, m.captureUs, m.rtpTS
	rc.flush(false)
}

// flush writes the rows that are decided, in index order.
func (rc *recorder) flush(all bool) {
	for {
		p := rc.pending[rc.nextWrite]
		if p == nil || !p.hasTick {
			if all && p != nil { // a frame without a tick: cannot happen, drop it
				delete(rc.pending, rc.nextWrite)
				continue
			}
			return
		}
		decided := p.arrived || rc.maxFrame > rc.nextWrite || all || rc.latestUs-p.deadlineUs > DefaultPendingRecordUs
		if !decided {
			return
		}
		i := rc.nextWrite
		c := p.captureUs
		if i > 0 && c <= rc.lastCapUs {
			c = rc.lastCapUs + 1 // keep capture times strictly increasing
		}
		var err error
		if p.arrived && len(p.jpeg) > 0 {
			err = rc.w.WriteFrame(i, c, p.jpeg, "jpg")
		} else {
			err = rc.w.WriteMissingFrame(i, c)
		}
		if err == nil {
			err = rc.w.WriteArrivalRow(recording.Arrival{Index: i, ArrivalUs: p.arrivalUs, Arrived: p.arrived,
				DeadlineUs: p.deadlineUs, HasDeadline: true, RTPTimestamp: p.rtpTS, HasRTP: p.arrived})
		}
		if err != nil {
			rc.fail("frames.csv", err)
			rc.log.Error("recording stopped being consistent; later frames are not recorded", "err", err)
			rc.pending = map[int]*pendingRow{}
			rc.nextWrite = 1 << 62
			return
		}
		rc.lastCapUs = c
		delete(rc.pending, i)
		rc.nextWrite++
	}
}

func (rc *recorder) onTel(row recording.TelemetryRow) {
	if rc.haveTel && row.TimeUs <= rc.lastTelUs {
		// telemetry.csv needs increasing t_us, but the filter takes a
		// sample that arrives out of order (an unordered data channel):
		// a replay of this recording will lack it, and may decide the
		// ticks after it differently. Counted, and said once per session.
		rc.met.recordErrors.Add(1)
		if !rc.warnedTelOrder {
			rc.warnedTelOrder = true
			rc.log.Warn("telemetry sample out of order not recorded: a replay of this recording lacks it and may differ from the live decisions",
				"t_us", row.TimeUs, "previous_t_us", rc.lastTelUs)
		}
		return
	}
	if err := rc.w.WriteTelemetry(row); err != nil {
		rc.fail("telemetry.csv", err)
		return
	}
	rc.haveTel, rc.lastTelUs = true, row.TimeUs
}

func (rc *recorder) fail(what string, err error) {
	rc.met.recordErrors.Add(1)
	rc.log.Warn("recording write failed", "file", what, "err", err)
}
