package simvehicle

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"github.com/pion/rtp"

	"stopgap/internal/lossmodel"
	"stopgap/stream/whip"
)

// DefaultQueuePackets is the capacity of the link's delay line when
// LinkConfig.QueuePackets is 0: 4096 items, about 4 s of 1280x720 video at
// 1 Mbit/s in 1200-octet packets plus its telemetry. When it is full, new
// items are dropped and counted (tail drop, like a router queue).
const DefaultQueuePackets = 4096

// maxPacketBytes is the buffer preallocated per queue slot; larger payloads
// grow their slot once (it keeps the larger buffer).
const maxPacketBytes = 1500

// Second PCG words of the link's random streams (ASCII "loss", "jitr"), the
// same split as lossmodel.Config.Simulate: changing the delay settings never
// changes which packets are lost.
const (
	lossStream   = 0x6c6f7373
	jitterStream = 0x6a697472
)

// Outage is a scripted interval during which the link drops everything:
// video packets (including retransmissions) and telemetry messages.
// Times are relative to the link's epoch (Link.SetEpoch; the Vehicle sets it
// to the start of playback).
type Outage struct {
	// At is when the first outage starts, >= 0.
	At time.Duration
	// Duration is how long each outage lasts, > 0.
	Duration time.Duration
	// Every, if > 0, repeats the outage with this period (> Duration);
	// 0 means once.
	Every time.Duration
}

// String formats o in the syntax ParseOutage reads, e.g. "2s+500ms" or
// "4s+1.5s@10s".
func (o Outage) String() string {
	s := o.At.String() + "+" + o.Duration.String()
	if o.Every > 0 {
		s += "@" + o.Every.String()
	}
	return s
}

// validate checks the ranges.
func (o Outage) validate() error {
	switch {
	case o.At < 0:
		return fmt.Errorf("%w: outage %v: start must be >= 0", ErrConfig, o)
	case o.Duration <= 0:
		return fmt.Errorf("%w: outage %v: duration must be > 0", ErrConfig, o)
	case o.Every < 0 || (o.Every > 0 && o.Every <= o.Duration):
		return fmt.Errorf("%w: outage %v: repeat period must be 0 (once) or longer than the duration", ErrConfig, o)
	}
	return nil
}

// covers reports whether elapsed (time since the epoch) falls in the outage.
func (o Outage) covers(elapsed time.Duration) bool {
	if elapsed < o.At {
		return false
	}
	d := elapsed - o.At
	if o.Every > 0 {
		d %= o.Every
	}
	return d < o.Duration
}

// ParseOutage reads an outage written START+DURATION or
// START+DURATION@EVERY with Go durations (time.ParseDuration), e.g.
// "2s+500ms" (from 2 s after the start, drop everything for 500 ms) or
// "3s+1.5s@8s" (the same every 8 s).
func ParseOutage(s string) (Outage, error) {
	var o Outage
	head, every, hasEvery := strings.Cut(strings.TrimSpace(s), "@")
	at, dur, ok := strings.Cut(head, "+")
	if !ok {
		return o, fmt.Errorf("%w: outage %q: want START+DURATION[@EVERY], e.g. 2s+500ms", ErrConfig, s)
	}
	var err error
	if o.At, err = time.ParseDuration(strings.TrimSpace(at)); err != nil {
		return Outage{}, fmt.Errorf("%w: outage %q: start: %w", ErrConfig, s, err)
	}
	if o.Duration, err = time.ParseDuration(strings.TrimSpace(dur)); err != nil {
		return Outage{}, fmt.Errorf("%w: outage %q: duration: %w", ErrConfig, s, err)
	}
	if hasEvery {
		if o.Every, err = time.ParseDuration(strings.TrimSpace(every)); err != nil {
			return Outage{}, fmt.Errorf("%w: outage %q: repeat period: %w", ErrConfig, s, err)
		}
	}
	if err := o.validate(); err != nil {
		return Outage{}, err
	}
	return o, nil
}

// LinkConfig configures a Link. The zero value is a perfect link: no loss,
// no delay, no outages.
type LinkConfig struct {
	// Loss gives the Gilbert-Elliott parameters (Model, LossRate, BurstMs,
	// GoodLossProb, BadDeliverProb), the fixed one-way delay ExtraDelayMs,
	// the jitter width JitterMs and the Seed, with the meaning documented
	// on lossmodel.Config, except that the chain steps per RTP packet in
	// continuous time (see Link) and FramePeriodMs is ignored. A zero Model
	// with all other fields zero means LossModelNone.
	Loss lossmodel.Config
	// Outages are scripted intervals that drop everything.
	Outages []Outage
	// QueuePackets bounds the delay line (video packets plus telemetry
	// messages in flight); 0 means DefaultQueuePackets.
	QueuePackets int
}

// LinkStats are a Link's counters.
type LinkStats struct {
	// PacketsIn counts RTP packets offered to SendRTP; PacketsQueueDropped
	// those dropped because the delay line was full.
	PacketsIn, PacketsQueueDropped uint64
	// PacketsWire counts packets (originals and retransmissions) seen by the
	// wire filter; PacketsLost those it dropped by the Gilbert-Elliott
	// model, PacketsOutage those it dropped in an outage.
	PacketsWire, PacketsLost, PacketsOutage uint64
	// BadSteps counts wire-filter decisions taken in the Bad state.
	BadSteps uint64
	// TelemetryIn counts messages offered to SendTelemetry; TelemetryQueueDropped
	// those dropped because the delay line was full; TelemetryOutage those
	// dropped in an outage; TelemetrySent those handed to the Sink.
	TelemetryIn, TelemetryQueueDropped, TelemetryOutage, TelemetrySent uint64
	// SinkErrors counts items the Sink refused.
	SinkErrors uint64
}

// Sink receives what leaves the link's delay line. *whip.Publisher
// implements it.
type Sink interface {
	WriteRTP(pkt *rtp.Packet) error
	SendTelemetry(b []byte) error
}

type itemKind uint8

const (
	itemRTP itemKind = iota + 1
	itemTelemetry
)

// item is one slot of the delay line; slots are preallocated and recycled.
type item struct {
	kind      itemKind
	hdr       rtp.Header
	buf       []byte
	releaseAt time.Time
}

// Link emulates a lossy, delaying one-way link between the vehicle and the
// relay. It has two halves:
//
//   - a delay line (SendRTP, SendTelemetry, Run): each item is released to
//     the Sink at send time + ExtraDelayMs + U*JitterMs, U uniform on [0, 1),
//     but never before the item sent before it (one FIFO: jitter spreads
//     packets but does not reorder them, our choice for a single path);
//   - a wire filter (Keep, for whip.PublishConfig.WireFilter) that drops
//     packets by a Gilbert-Elliott chain and during scripted outages, after
//     the Publisher's NACK buffer, so NACKs can recover losses as on a real
//     link.
//
// Gilbert-Elliott per packet. With k = GoodLossProb, h = 1-BadDeliverProb,
// pi_B = (LossRate-k)/(h-k) and mean Bad duration B = BurstMs, the chain is
// the continuous-time two-state Markov chain with rates 1/B (Bad->Good) and
// pi_B/((1-pi_B) B) (Good->Bad), stepped at each packet over the time dt since
// the previous one:
//
//	e = exp(-dt / ((1-pi_B) B))
//	P(Bad | was Bad)  = pi_B + (1-pi_B) e
//	P(Bad | was Good) = pi_B (1 - e)
//
// For dt much shorter than B this is lossmodel.Config's per-frame chain with
// the frame period replaced by dt (P(Good | Bad) ~ dt/B, P(Bad | Good) ~
// (dt/B) pi_B/(1-pi_B)); unlike the discrete form it is valid for any dt, so
// it does not depend on the packet rate. The stationary Bad share is pi_B and
// the long-run loss rate LossRate, as in lossmodel. The first packet's state is
// drawn from the stationary distribution.
//
// All methods are safe for concurrent use. The delay line is bounded
// (QueuePackets); a full line drops the new item and counts it.
type Link struct {
	cfg   LinkConfig
	clock Clock
	piB   float64 // stationary Bad share
	tauUs float64 // (1-pi_B) B in microseconds: the chain's time constant
	k, h  float64
	ge    bool
	delay time.Duration
	jitUs float64

	free  chan *item
	queue chan *item

	mu          sync.Mutex
	outages     []Outage
	epoch       time.Time
	lossRng     *rand.Rand
	jitRng      *rand.Rand
	bad         bool
	stepped     bool
	lastStep    time.Time
	lastRelease time.Time

	packetsIn, packetsQueueDropped                      atomic.Uint64
	packetsWire, packetsLost, packetsOutage, badSteps   atomic.Uint64
	telemetryIn, telemetryQueueDropped, telemetryOutage atomic.Uint64
	telemetrySent, sinkErrors                           atomic.Uint64
}

// NewLink validates cfg and returns a Link on clock (nil means SystemClock).
func NewLink(cfg LinkConfig, clock Clock) (*Link, error) {
	if clock == nil {
		clock = SystemClock{}
	}
	if cfg.Loss.Model == lossmodel.Invalid && cfg.Loss == (lossmodel.Config{}) {
		cfg.Loss.Model = lossmodel.None
	}
	if err := cfg.Loss.Validate(); err != nil {
		return nil, fmt.Errorf("%w: link loss: %w", ErrConfig, err)
	}
	for _, o := range cfg.Outages {
		if err := o.validate(); err != nil {
			return nil, err
		}
	}
	if cfg.QueuePackets < 0 {
		return nil, fmt.Errorf("%w: QueuePackets %d must be >= 0 (0 = %d)", ErrConfig, cfg.QueuePackets, DefaultQueuePackets)
	}
	if cfg.QueuePackets == 0 {
		cfg.QueuePackets = DefaultQueuePackets
	}
	cfg.Outages = append([]Outage(nil), cfg.Outages...)
	l := &Link{
		cfg:     cfg,
		clock:   clock,
		delay:   time.Duration(math.Round(cfg.Loss.ExtraDelayMs * 1e6)),
		jitUs:   cfg.Loss.JitterMs * 1000,
		free:    make(chan *item, cfg.QueuePackets),
		queue:   make(chan *item, cfg.QueuePackets),
		lossRng: rand.New(rand.NewPCG(cfg.Loss.Seed, lossStream)),
		jitRng:  rand.New(rand.NewPCG(cfg.Loss.Seed, jitterStream)),
		outages: append([]Outage(nil), cfg.Outages...),
	}
	if cfg.Loss.Model == lossmodel.GilbertElliott {
		l.ge = true
		l.k, l.h = cfg.Loss.GoodLossProb, 1-cfg.Loss.BadDeliverProb
		l.piB = (cfg.Loss.LossRate - l.k) / (l.h - l.k)
		l.tauUs = (1 - l.piB) * cfg.Loss.BurstMs * 1000
	}
	for range cfg.QueuePackets {
		l.free <- &item{buf: make([]byte, 0, maxPacketBytes)}
	}
	return l, nil
}

// Config returns the configuration in use (defaults applied).
func (l *Link) Config() LinkConfig {
	c := l.cfg
	c.Outages = append([]Outage(nil), c.Outages...)
	return c
}

// SetEpoch sets the origin of the outage times. Before it is called no
// outage is active.
func (l *Link) SetEpoch(t time.Time) {
	l.mu.Lock()
	l.epoch = t
	l.mu.Unlock()
}

// OutageNow adds an outage that starts at the current time and lasts d,
// for tests and interactive use. It returns the outage as added (relative to
// the epoch), or an error wrapping ErrConfig when d <= 0 or the epoch is not
// set yet.
func (l *Link) OutageNow(d time.Duration) (Outage, error) {
	now := l.clock.Now()
	l.mu.Lock()
	defer l.mu.Unlock()
	if l.epoch.IsZero() {
		return Outage{}, fmt.Errorf("%w: OutageNow before the link's epoch was set (start the vehicle first)", ErrConfig)
	}
	o := Outage{At: max(now.Sub(l.epoch), 0), Duration: d}
	if err := o.validate(); err != nil {
		return Outage{}, err
	}
	l.outages = append(l.outages, o)
	return o, nil
}

// Epoch returns the origin of the outage times (zero before SetEpoch).
func (l *Link) Epoch() time.Time {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.epoch
}

// InOutage reports whether t falls in a scripted outage.
func (l *Link) InOutage(t time.Time) bool {
	l.mu.Lock()
	defer l.mu.Unlock()
	if l.epoch.IsZero() {
		return false
	}
	el := t.Sub(l.epoch)
	for _, o := range l.outages {
		if o.covers(el) {
			return true
		}
	}
	return false
}

// SendRTP puts a copy of pkt (header and payload) into the delay line. It
// never blocks; it returns false when the line is full and the packet was
// dropped. pkt is not retained.
func (l *Link) SendRTP(pkt *rtp.Packet) bool {
	l.packetsIn.Add(1)
	it := l.take()
	if it == nil {
		l.packetsQueueDropped.Add(1)
		return false
	}
	it.kind = itemRTP
	it.hdr = pkt.Header
	it.hdr.CSRC = nil
	it.hdr.Extensions = nil
	it.hdr.Extension = false
	it.buf = append(it.buf[:0], pkt.Payload...)
	l.enqueue(it)
	return true
}

// SendTelemetry puts a copy of the message b into the delay line. It never
// blocks; it returns false when the line is full and the message was dropped.
func (l *Link) SendTelemetry(b []byte) bool {
	l.telemetryIn.Add(1)
	it := l.take()
	if it == nil {
		l.telemetryQueueDropped.Add(1)
		return false
	}
	it.kind = itemTelemetry
	it.buf = append(it.buf[:0], b...)
	l.enqueue(it)
	return true
}

func (l *Link) take() *item {
	select {
	case it := <-l.free:
		return it
	default:
		return nil
	}
}

// enqueue stamps the release time and queues it. The queue has room for
// every slot, so it never blocks.
func (l *Link) enqueue(it *item) {
	now := l.clock.Now()
	l.mu.Lock()
	rel := now.Add(l.delay)
	if l.jitUs > 0 {
		rel = rel.Add(time.Duration(math.Floor(l.jitRng.Float64()*l.jitUs)) * time.Microsecond)
	}
	if rel.Before(l.lastRelease) {
		rel = l.lastRelease
	}
	l.lastRelease = rel
	it.releaseAt = rel
	l.queue <- it // under mu so queue order equals release order
	l.mu.Unlock()
}

// Run releases the delay line into sink until ctx ends. It returns an error
// wrapping ErrStopped when the sink reports whip.ErrSessionClosed, else
// ctx.Err(). Run it once, in its own goroutine.
func (l *Link) Run(ctx context.Context, sink Sink) error {
	for {
		var it *item
		select {
		case <-ctx.Done():
			return ctx.Err()
		case it = <-l.queue:
		}
		if err := l.clock.WaitUntil(ctx, it.releaseAt); err != nil {
			l.free <- it
			return err
		}
		var err error
		switch it.kind {
		case itemRTP:
			pkt := rtp.Packet{Header: it.hdr, Payload: it.buf}
			err = sink.WriteRTP(&pkt)
		case itemTelemetry:
			if l.InOutage(l.clock.Now()) {
				l.telemetryOutage.Add(1)
			} else if err = sink.SendTelemetry(it.buf); err == nil {
				l.telemetrySent.Add(1)
			}
		}
		l.free <- it
		if err != nil {
			l.sinkErrors.Add(1)
			if errors.Is(err, whip.ErrSessionClosed) {
				return fmt.Errorf("%w: %w", ErrStopped, err)
			}
		}
	}
}

// Keep is the wire filter (whip.PublishConfig.WireFilter): it reports
// whether a packet about to go on the wire survives the link, by the
// Gilbert-Elliott chain and the outages. It is quick and does not allocate.
func (l *Link) Keep(_ *rtp.Header, _ []byte) bool {
	now := l.clock.Now()
	l.packetsWire.Add(1)
	if l.InOutage(now) {
		l.packetsOutage.Add(1)
		return false
	}
	if !l.ge {
		return true
	}
	l.mu.Lock()
	uState, uLoss := l.lossRng.Float64(), l.lossRng.Float64()
	if !l.stepped {
		l.bad = uState < l.piB
		l.stepped = true
	} else {
		dtUs := float64(now.Sub(l.lastStep).Microseconds())
		if dtUs < 0 {
			dtUs = 0
		}
		e := math.Exp(-dtUs / l.tauUs)
		if l.bad {
			l.bad = uState < l.piB+(1-l.piB)*e
		} else {
			l.bad = uState < l.piB*(1-e)
		}
	}
	l.lastStep = now
	p := l.k
	if l.bad {
		p = l.h
		l.badSteps.Add(1)
	}
	l.mu.Unlock()
	if uLoss < p {
		l.packetsLost.Add(1)
		return false
	}
	return true
}

// Stats returns a snapshot of the counters.
func (l *Link) Stats() LinkStats {
	return LinkStats{
		PacketsIn: l.packetsIn.Load(), PacketsQueueDropped: l.packetsQueueDropped.Load(),
		PacketsWire: l.packetsWire.Load(), PacketsLost: l.packetsLost.Load(), PacketsOutage: l.packetsOutage.Load(),
		BadSteps:    l.badSteps.Load(),
		TelemetryIn: l.telemetryIn.Load(), TelemetryQueueDropped: l.telemetryQueueDropped.Load(),
		TelemetryOutage: l.telemetryOutage.Load(), TelemetrySent: l.telemetrySent.Load(),
		SinkErrors: l.sinkErrors.Load(),
	}
}
