package rtpvp8

import (
	"fmt"
	"time"

	"github.com/pion/rtp"
)

// Defaults for [AssemblerConfig] fields left at zero.
const (
	// DefaultReorderPackets is the default reorder window in packets.
	DefaultReorderPackets = 64
	// DefaultReorderDelay is the default time a missing packet is waited
	// for. Our choice: longer than the reordering usually seen on one path,
	// shorter than one frame interval at 15 fps, so a late packet rarely
	// delays a frame by more than a few display ticks.
	DefaultReorderDelay = 50 * time.Millisecond
	// DefaultMaxPackets is the default packet buffer capacity.
	DefaultMaxPackets = 1024
	// DefaultMaxPayloadBytes is the default largest RTP payload accepted:
	// an Ethernet MTU (common practice: WebRTC senders keep RTP packets
	// near 1200 octets).
	DefaultMaxPayloadBytes = 1500
	// DefaultMaxFrameBytes is the default largest VP8 frame assembled.
	DefaultMaxFrameBytes = 1 << 20
	// DefaultResyncPackets is the default number of consecutive too-old
	// packets after which the assembler assumes the sender restarted its
	// sequence numbers and starts over.
	DefaultResyncPackets = 64

	maxRing = 1 << 15 // half the sequence number space
)

// AssemblerConfig holds the limits of an [Assembler]. The zero value uses the
// documented defaults.
type AssemblerConfig struct {
	// ReorderPackets is how many sequence numbers the newest packet may be
	// ahead of a missing one before the missing packet is declared lost.
	// Zero means [DefaultReorderPackets], or half of MaxPackets if that is
	// less. Must be below MaxPackets.
	ReorderPackets int
	// ReorderDelay is how long a missing packet is waited for, counted from
	// the earliest arrival of a packet after it. Zero means
	// [DefaultReorderDelay]; negative is invalid.
	ReorderDelay time.Duration
	// MaxPackets bounds the packets buffered (rounded up to a power of
	// two, at most 32768). Zero means [DefaultMaxPackets]. A packet that
	// does not fit forces the oldest incomplete frames out as lost.
	MaxPackets int
	// MaxPayloadBytes is the largest RTP payload accepted, in octets;
	// larger packets are dropped and counted. Zero means
	// [DefaultMaxPayloadBytes]; at most 65535.
	MaxPayloadBytes int
	// MaxFrameBytes is the largest VP8 frame assembled, in octets; a larger
	// frame is dropped and reported as a [LossOversize]. Zero means
	// [DefaultMaxFrameBytes].
	MaxFrameBytes int
	// RepairWait, if positive, lets a missing packet be repaired by a
	// retransmission: a complete later frame no longer ends the wait at
	// once (unless it is a keyframe, which needs nothing before it), and
	// the packet is waited for RepairWait instead of ReorderDelay, counted
	// the same way. Set it to the span over which the receiver still asks
	// for the packet (its NACKs): a frame repaired after its own display
	// deadline is still the reference the frames after it decode from.
	// Zero keeps the plain reordering policy; negative is invalid. See
	// also [Assembler.SetRepairWait].
	RepairWait time.Duration
	// ResyncPackets is the number of consecutive too-old packets after
	// which the assembler drops its state and restarts at the current
	// packet (a sender that restarted its sequence numbers). Zero means
	// [DefaultResyncPackets].
	ResyncPackets int
}

// withDefaults returns c with zero fields replaced by defaults, or an error
// wrapping ErrInvalidConfig.
func (c AssemblerConfig) withDefaults() (AssemblerConfig, error) {
	if c.MaxPackets == 0 {
		c.MaxPackets = DefaultMaxPackets
	}
	if c.ReorderPackets == 0 {
		c.ReorderPackets = min(DefaultReorderPackets, max(1, c.MaxPackets/2))
	}
	if c.ReorderDelay == 0 {
		c.ReorderDelay = DefaultReorderDelay
	}
	if c.MaxPayloadBytes == 0 {
		c.MaxPayloadBytes = DefaultMaxPayloadBytes
	}
	if c.MaxFrameBytes == 0 {
		c.MaxFrameBytes = DefaultMaxFrameBytes
	}
	if c.ResyncPackets == 0 {
		c.ResyncPackets = DefaultResyncPackets
	}
	bad := func(field string, v any, want string) error {
		return fmt.Errorf("%w: %s is %v, want %s", ErrInvalidConfig, field, v, want)
	}
	switch {
	case c.MaxPackets < 2 || c.MaxPackets > maxRing:
		return c, bad("MaxPackets", c.MaxPackets, fmt.Sprintf("2..%d", maxRing))
	case c.ReorderPackets < 1 || c.ReorderPackets >= c.MaxPackets:
		return c, bad("ReorderPackets", c.ReorderPackets, fmt.Sprintf("1..%d (below MaxPackets)", c.MaxPackets-1))
	case c.ReorderDelay < 0:
		return c, bad("ReorderDelay", c.ReorderDelay, "a positive duration")
	case c.RepairWait < 0:
		return c, bad("RepairWait", c.RepairWait, "zero or a positive duration")
	case c.MaxPayloadBytes < 2 || c.MaxPayloadBytes > 65535:
		return c, bad("MaxPayloadBytes", c.MaxPayloadBytes, "2..65535")
	case c.MaxFrameBytes < 1:
		return c, bad("MaxFrameBytes", c.MaxFrameBytes, "a positive size")
	case c.ResyncPackets < 1:
		return c, bad("ResyncPackets", c.ResyncPackets, "a positive count")
	}
	return c, nil
}

// Frame is one complete VP8 frame as assembled from RTP packets.
type Frame struct {
	// Data is the VP8 frame (payload descriptors stripped). It is owned by
	// the [Assembler] and valid only until [Sink.OnFrame] returns: copy it
	// to keep it.
	Data []byte
	// RTPTimestamp is the RTP timestamp of the frame (90 kHz for VP8).
	RTPTimestamp uint32
	// FirstSeq and LastSeq are the sequence numbers of the first and last
	// packet; every sequence number between them (with wrap at 65535) was
	// received, either as part of the frame or as a padding-only packet.
	FirstSeq, LastSeq uint16
	// Packets is the number of media packets in the frame.
	Packets int
	// Parts are the frame's media packets in sequence order (padding-only
	// packets left out): each one's payload descriptor, sequence number,
	// marker bit and VP8 data, which is a sub-slice of Data. A relay that
	// forwards the frame packet by packet keeps the sender's packet
	// boundaries and descriptor fields from them. Like Data, Parts is owned
	// by the [Assembler] and valid only until [Sink.OnFrame] returns.
	Parts []Part
	// Keyframe is true when the frame decodes without reference to others
	// (P bit of the VP8 frame tag is 0).
	Keyframe bool
	// ShowFrame is the VP8 show_frame bit.
	ShowFrame bool
	// Width and Height are the picture size in pixels, set for keyframes.
	Width, Height int
	// HasPictureID tells whether the first packet carried a picture ID.
	HasPictureID bool
	// PictureID is the picture ID of the first packet (7 or 15 bits).
	PictureID uint16
	// NonReference is the N bit of the first packet: no later frame
	// references this one.
	NonReference bool
	// RefsMissing is true for a non-key frame emitted while a keyframe is
	// needed: a frame was lost since the last keyframe, or no keyframe was
	// seen yet, so the decoder's references may be incomplete.
	RefsMissing bool
	// MissingMarker is true when the frame ended at the next frame's first
	// packet rather than at a packet with the RTP marker bit (a sender that
	// does not set the marker; the frame is still complete).
	MissingMarker bool
	// ArrivalFirst and ArrivalLast are the earliest and latest arrival
	// times among the frame's packets.
	ArrivalFirst, ArrivalLast time.Time
}

// Part is one media packet of a delivered [Frame].
type Part struct {
	// Desc is the packet's VP8 payload descriptor as received.
	Desc Descriptor
	// Seq is the packet's RTP sequence number and Marker its marker bit.
	Seq    uint16
	Marker bool
	// Data is the VP8 data after the descriptor (never empty).
	Data []byte
}

// LossReason tells why an [Assembler] gave up on packets.
type LossReason uint8

// Loss reasons. The zero value is invalid.
const (
	// LossInvalid is the zero value; it is never reported.
	LossInvalid LossReason = iota
	// LossWindow: the newest packet got ReorderPackets ahead of a missing
	// one.
	LossWindow
	// LossDeadline: a missing packet was waited for ReorderDelay.
	LossDeadline
	// LossNewerFrame: a later frame was complete while an older one still
	// missed packets; the older one is given up so the stream never stalls.
	LossNewerFrame
	// LossStartMissing: packets of a frame whose first packet (S=1, PID=0)
	// was never seen, e.g. at the start of reception.
	LossStartMissing
	// LossOversize: the frame grew beyond MaxFrameBytes.
	LossOversize
	// LossOverflow: the packet buffer was full (MaxPackets).
	LossOverflow
	// LossBadFrame: the assembled frame's VP8 header is invalid (see
	// [ParseFrameHeader]).
	LossBadFrame
	// LossReset: the sequence numbers jumped back for ResyncPackets packets
	// in a row; the buffered packets were dropped and reception restarted.
	LossReset
	// LossFlushed: [Assembler.Flush] was called with packets buffered.
	LossFlushed

	lossReasonCount
)

var lossReasonNames = [...]string{
	LossInvalid:      "invalid",
	LossWindow:       "window",
	LossDeadline:     "deadline",
	LossNewerFrame:   "newer-frame",
	LossStartMissing: "start-missing",
	LossOversize:     "oversize",
	LossOverflow:     "overflow",
	LossBadFrame:     "bad-frame",
	LossReset:        "reset",
	LossFlushed:      "flushed",
}

// String returns a short lower-case name, e.g. "deadline".
func (r LossReason) String() string {
	if int(r) < len(lossReasonNames) {
		return lossReasonNames[r]
	}
	return fmt.Sprintf("LossReason(%d)", uint8(r))
}

// Loss reports a run of sequence numbers the [Assembler] gave up on. Every
// frame that had packets in the run is lost. A frame none of whose packets
// arrived is lost without its timestamp being known; it lies between the
// frames delivered before and after the loss.
type Loss struct {
	// Reason tells why the packets were given up.
	Reason LossReason
	// FirstSeq and LastSeq bound the run of sequence numbers given up,
	// inclusive (with wrap at 65535).
	FirstSeq, LastSeq uint16
	// Missing counts sequence numbers in the run that never arrived.
	Missing int
	// Dropped counts media packets in the run that had arrived and were
	// discarded because their frame was incomplete.
	Dropped int
	// HasTimestamp tells whether any dropped packet was seen, so that
	// FirstRTPTimestamp and LastRTPTimestamp are known.
	HasTimestamp bool
	// FirstRTPTimestamp and LastRTPTimestamp are the RTP timestamps of the
	// first and last dropped packet in sequence order.
	FirstRTPTimestamp, LastRTPTimestamp uint32
	// HasPrev tells whether a frame was delivered before the loss (since
	// the start or the last resync), so that PrevRTPTimestamp is known.
	HasPrev bool
	// PrevRTPTimestamp is the RTP timestamp of the last frame delivered
	// before the loss: the lost frames were captured after it.
	PrevRTPTimestamp uint32
	// Declared is the time the loss was declared: the arrival time passed
	// to [Assembler.Push] or the time passed to [Assembler.Expire] or
	// [Assembler.Flush].
	Declared time.Time
}

// DropReason names the counter a packet that did not become part of a frame
// was counted under.
type DropReason uint8

// Drop reasons. The zero value is invalid.
const (
	// DropInvalid is the zero value; it is never reported.
	DropInvalid DropReason = iota
	// DropMalformed: not RTP version 2, nil, or a bad VP8 payload
	// descriptor.
	DropMalformed
	// DropDuplicate: a sequence number already buffered.
	DropDuplicate
	// DropTooOld: a sequence number already delivered or given up (a late
	// packet, or a late retransmission).
	DropTooOld
	// DropOversize: a payload larger than MaxPayloadBytes.
	DropOversize
	// DropPadding: a padding-only packet (empty payload); not an error.
	DropPadding
)

var dropReasonNames = [...]string{
	DropInvalid:   "invalid",
	DropMalformed: "malformed",
	DropDuplicate: "duplicate",
	DropTooOld:    "too-old",
	DropOversize:  "oversize",
	DropPadding:   "padding",
}

// String returns a short lower-case name, e.g. "too-old".
func (r DropReason) String() string {
	if int(r) < len(dropReasonNames) {
		return dropReasonNames[r]
	}
	return fmt.Sprintf("DropReason(%d)", uint8(r))
}

// Stats are the counters of an [Assembler] since it was created.
type Stats struct {
	// Packets counts calls to Push.
	Packets uint64
	// Accepted counts media packets stored for assembly.
	Accepted uint64
	// Padding counts padding-only packets (empty payload), which are
	// ignored except to fill their sequence number.
	Padding uint64
	// Malformed counts packets rejected as malformed (see [DropMalformed]).
	Malformed uint64
	// Duplicate counts packets whose sequence number was already buffered.
	Duplicate uint64
	// TooOld counts packets behind the delivery point.
	TooOld uint64
	// Oversize counts packets larger than MaxPayloadBytes.
	Oversize uint64
	// Frames counts frames delivered; Keyframes those that are keyframes.
	Frames, Keyframes uint64
	// MissingMarker counts frames delivered that ended without a marker
	// bit.
	MissingMarker uint64
	// Losses counts Loss events; LossesBy breaks them down by reason.
	Losses uint64
	// MissingPackets counts sequence numbers given up as never received.
	MissingPackets uint64
	// DroppedPackets counts received media packets discarded because
	// their frame was lost, including stragglers of an already reported
	// frame.
	DroppedPackets uint64
	// Resyncs counts restarts after a run of too-old packets.
	Resyncs uint64

	byReason [lossReasonCount]uint64
}

// LossesBy returns the number of Loss events with reason r.
func (s *Stats) LossesBy(r LossReason) uint64 {
	if int(r) < len(s.byReason) {
		return s.byReason[r]
	}
	return 0
}

// Sink receives the output of an [Assembler] in stream order. Its methods are
// called synchronously from Push, Expire and Flush and must not call back
// into the Assembler.
type Sink interface {
	// OnFrame receives a complete frame. f.Data is owned by the Assembler
	// and valid only until OnFrame returns.
	OnFrame(f Frame)
	// OnLoss receives a run of packets given up.
	OnLoss(l Loss)
}

// SinkFuncs adapts two functions to a [Sink]. A nil function ignores its
// events.
type SinkFuncs struct {
	// Frame receives frames (see [Sink.OnFrame]).
	Frame func(Frame)
	// Loss receives losses (see [Sink.OnLoss]).
	Loss func(Loss)
}

// OnFrame calls s.Frame if it is set.
func (s SinkFuncs) OnFrame(f Frame) {
	if s.Frame != nil {
		s.Frame(f)
	}
}

// OnLoss calls s.Loss if it is set.
func (s SinkFuncs) OnLoss(l Loss) {
	if s.Loss != nil {
		s.Loss(l)
	}
}

type slotKind uint8

const (
	slotEmpty slotKind = iota
	slotMedia
	slotPadding
)

// slot holds one buffered packet; valid only when ext matches the extended
// sequence number looked up.
type slot struct {
	ext     int64
	kind    slotKind
	marker  bool
	ts      uint32
	desc    Descriptor
	arrival time.Time
	data    []byte // VP8 data, a copy owned by the Assembler
}

// Assembler turns RTP packets carrying VP8 into complete frames and explicit
// losses, delivered in sequence order to a [Sink].
//
// A frame is complete when its first packet (S=1, PID=0) and every sequence
// number up to its marker-bit packet have arrived (RFC 7741 section 4.1,
// 4.2); sequence numbers wrap at 65535 without loss. A missing packet is
// waited for while all of these hold: the newest packet is less than
// ReorderPackets ahead of it, less than ReorderDelay passed since the first
// packet after it arrived, no later frame is complete, and the buffer is not
// full. Then the incomplete frames are reported as one [Loss] and delivery
// resumes at the next frame start: one lost packet never stalls the stream.
// Any loss makes [Assembler.NeedKeyframe] true until a keyframe is
// delivered.
//
// Policy (RepairWait zero): a complete later frame ends the wait for an earlier one at once,
// because on a live view a fresh frame is worth more than an old one, and
// the frames are delivered in order. So reordering is tolerated inside a
// frame and across a frame border only while the later frame is still
// incomplete; a packet overtaken by a whole later frame (at 30 fps, by some
// 33 ms) arrives too late and is counted as too old. A retransmission (NACK)
// that arrives after its frame was given up is counted the same way.
//
// Policy with RepairWait set (a receiver that sends NACKs): only a complete
// later keyframe ends the wait at once; otherwise the missing packet is
// waited for RepairWait, so its retransmission completes the frame and the
// frames after it, which reference it, stay decodable. While a keyframe is
// needed (NeedKeyframe), only a hole in the keyframe itself is waited for
// that way: inter frames before it cannot be decoded anyway.
//
// Packets with an empty payload (RTP padding only) fill their sequence
// number and are otherwise ignored: they never advance the window, force
// packets out, or end a frame. Duplicates and packets behind the delivery
// point are counted and dropped.
//
// Memory is bounded by MaxPackets*MaxPayloadBytes + MaxFrameBytes. After
// warm-up, Push does not allocate. An Assembler is not safe for concurrent
// use.
type Assembler struct {
	cfg  AssemblerConfig
	sink Sink

	slots []slot
	mask  int64

	started   bool  // head and newest are set
	committed bool  // something was delivered or given up since (re)start
	head      int64 // lowest extended sequence number not yet delivered or given up
	newest    int64 // highest extended sequence number of an accepted media packet
	oldStreak int   // consecutive too-old media packets

	needKey bool
	// keyExt and keyAt: the first packet of the newest keyframe seen
	// starting (keyOK), and its arrival (KeyframeArriving).
	keyExt int64
	keyAt  time.Time
	keyOK  bool
	lostTS uint32 // timestamp of the last frame reported lost
	lostOK bool
	prevTS uint32 // timestamp of the last frame delivered
	prevOK bool

	// Scan cache for the frame at head: positions before scanPos are
	// present and checked, their VP8 data totals scanSize octets.
	scanHead int64
	scanPos  int64
	scanSize int

	frame []byte // assembly buffer, reused
	parts []Part // Frame.Parts, reused
	stats Stats
}

// NewAssembler returns an Assembler with the given limits that delivers to
// sink. A nil sink discards the output (the counters still run). It fails
// with an error wrapping [ErrInvalidConfig] naming a bad field.
func NewAssembler(cfg AssemblerConfig, sink Sink) (*Assembler, error) {
	c, err := cfg.withDefaults()
	if err != nil {
		return nil, err
	}
	n := 1
	for n < c.MaxPackets {
		n <<= 1
	}
	c.MaxPackets = n
	if sink == nil {
		sink = SinkFuncs{}
	}
	return &Assembler{
		cfg:     c,
		sink:    sink,
		slots:   make([]slot, n),
		mask:    int64(n - 1),
		needKey: true,
	}, nil
}

// SetRepairWait changes AssemblerConfig.RepairWait, e.g. as the measured
// round trip changes; it fails with an error wrapping [ErrInvalidConfig]
// for a negative d. It takes effect at the next Push or Expire.
func (a *Assembler) SetRepairWait(d time.Duration) error {
	if d < 0 {
		return fmt.Errorf("%w: RepairWait is %v, want zero or a positive duration", ErrInvalidConfig, d)
	}
	a.cfg.RepairWait = d
	return nil
}

// Config returns the configuration in use, with defaults filled in and
// MaxPackets rounded up.
func (a *Assembler) Config() AssemblerConfig { return a.cfg }

// Stats returns a copy of the counters.
func (a *Assembler) Stats() Stats { return a.stats }

// KeyframeArriving reports whether the first packet of a keyframe arrived
// after since and that keyframe is still being assembled: neither
// delivered nor given up. A receiver that asked for a keyframe at since
// need not ask again while the answer is on its way (a sender paces a
// keyframe's many packets out over tens of milliseconds); if a hole in it
// cannot be repaired, the keyframe is given up and this turns false.
func (a *Assembler) KeyframeArriving(since time.Time) bool {
	return a.keyOK && a.keyExt >= a.head && a.keyAt.After(since)
}

// NeedKeyframe reports whether the decoder needs a keyframe: none has been
// delivered yet, or a loss was reported since the last one. A receiver uses
// it to send (and repeat, at its own pace) a picture loss indication.
func (a *Assembler) NeedKeyframe() bool { return a.needKey }

// Push adds one RTP packet that arrived at the given time, and delivers to
// the sink every frame and loss it resolves. The packet is not retained: its
// payload is copied.
//
// Push returns a [*PacketError] for a packet it rejects as malformed (nil,
// RTP version not 2, bad VP8 payload descriptor) or oversize; the packet is
// counted and dropped and the stream goes on. Padding, duplicates and late
// packets are counted in [Stats] and are not errors.
func (a *Assembler) Push(pkt *rtp.Packet, arrival time.Time) error {
	a.stats.Packets++
	if pkt == nil {
		a.stats.Malformed++
		return &PacketError{Reason: DropMalformed, Err: ErrNilPacket}
	}
	seq := pkt.SequenceNumber
	if pkt.Version != 2 {
		a.stats.Malformed++
		return &PacketError{Seq: seq, Reason: DropMalformed, Err: ErrRTPVersion}
	}
	if len(pkt.Payload) == 0 {
		a.stats.Padding++
		a.pushPadding(seq, arrival)
		return nil
	}
	if len(pkt.Payload) > a.cfg.MaxPayloadBytes {
		a.stats.Oversize++
		return &PacketError{Seq: seq, Reason: DropOversize,
			Err: fmt.Errorf("%w: %d octets, limit %d", ErrPayloadTooLarge, len(pkt.Payload), a.cfg.MaxPayloadBytes)}
	}
	var d Descriptor
	n, err := d.Unmarshal(pkt.Payload)
	if err != nil {
		a.stats.Malformed++
		return &PacketError{Seq: seq, Reason: DropMalformed, Err: err}
	}

	if !a.started {
		a.start(seq)
	} else {
		// Give up what expired before this packet arrived, so the outcome
		// does not depend on how often Expire is called.
		a.advance(arrival)
	}
	ext := a.unwrap(seq)
	if ext < a.head {
		if !a.committed && a.head-ext <= int64(a.cfg.ReorderPackets) && a.newest-ext <= a.mask {
			// Still before the first delivery: a reordered packet from
			// before the first one seen moves the start back.
			a.head = ext
		} else {
			a.oldStreak++
			if a.oldStreak < a.cfg.ResyncPackets {
				a.stats.TooOld++
				return nil
			}
			// This packet starts the new sequence and is accepted below.
			a.resync(seq, arrival)
			ext = a.unwrap(seq)
		}
	}
	a.oldStreak = 0
	if ext-a.head > a.mask {
		a.overflow(ext, arrival)
	}
	s := &a.slots[ext&a.mask]
	if s.ext == ext && s.kind == slotMedia {
		a.stats.Duplicate++
		return nil
	}
	if s.ext == ext && s.kind == slotPadding {
		a.scanHead = -1 // a scanned position changes content
	}
	s.ext = ext
	s.kind = slotMedia
	s.marker = pkt.Marker
	s.ts = pkt.Timestamp
	s.desc = d
	s.arrival = arrival
	s.data = grow(s.data, len(pkt.Payload)-n, a.cfg.MaxPayloadBytes)
	copy(s.data, pkt.Payload[n:])
	if ext > a.newest {
		a.newest = ext
	}
	if d.Start && d.PartitionID == 0 && isKeyframeStart(s) && (!a.keyOK || ext > a.keyExt) {
		a.keyExt, a.keyAt, a.keyOK = ext, arrival, true
	}
	a.stats.Accepted++
	a.advance(arrival)
	return nil
}

// Expire gives up on missing packets whose ReorderDelay has passed at time
// now and delivers what that resolves. Call it from a timer (every few tens
// of milliseconds) so that a loss is reported even when no packet follows.
func (a *Assembler) Expire(now time.Time) { a.advance(now) }

// Flush delivers every complete frame, then reports all packets still
// buffered as lost ([LossFlushed]), e.g. at the end of a stream. The
// sequence state is kept: packets behind the newest one stay too old.
func (a *Assembler) Flush(now time.Time) {
	if !a.started {
		return
	}
	a.advance(now)
	if a.head <= a.newest {
		a.skipTo(a.newest+1, LossFlushed, now)
	}
}

// start initialises the sequence state at the first media packet.
func (a *Assembler) start(seq uint16) {
	a.started = true
	a.committed = false
	a.lostOK = false
	a.prevOK = false
	a.keyOK = false
	a.newest = 1<<32 + int64(seq)
	a.head = a.newest
	a.scanHead = -1
}

// unwrap extends a 16-bit sequence number to the int64 nearest the newest.
func (a *Assembler) unwrap(seq uint16) int64 {
	return a.newest + int64(int16(seq-uint16(a.newest)))
}

// at returns the buffered packet with extended sequence number e, or nil.
func (a *Assembler) at(e int64) *slot {
	s := &a.slots[e&a.mask]
	if s.ext != e || s.kind == slotEmpty {
		return nil
	}
	return s
}

func (a *Assembler) pushPadding(seq uint16, now time.Time) {
	if !a.started {
		return
	}
	ext := a.unwrap(seq)
	if ext < a.head || ext-a.head > a.mask {
		return // never moves the window or forces media out
	}
	s := &a.slots[ext&a.mask]
	if s.ext == ext && s.kind == slotMedia {
		return
	}
	s.ext = ext
	s.kind = slotPadding
	s.data = s.data[:0]
	a.advance(now)
}

// resync drops all state after a run of too-old packets and restarts at seq.
func (a *Assembler) resync(seq uint16, now time.Time) {
	a.stats.Resyncs++
	if a.head <= a.newest {
		a.skipTo(a.newest+1, LossReset, now)
	}
	a.needKey = true
	a.oldStreak = 0
	a.start(seq)
}

// overflow makes room for the packet at ext by giving up the oldest packets.
func (a *Assembler) overflow(ext int64, now time.Time) {
	target := ext - a.mask
	end := a.nextStart(target - 1)
	if end < target {
		end = target
	}
	a.skipTo(end, LossOverflow, now)
}

// nextStart returns the extended sequence number of the first buffered
// frame start after e, or newest+1 if there is none.
func (a *Assembler) nextStart(e int64) int64 {
	if e < a.head-1 {
		e = a.head - 1
	}
	for s := e + 1; s <= a.newest; s++ {
		if p := a.at(s); p != nil && p.kind == slotMedia && p.desc.FrameStart() {
			return s
		}
	}
	return a.newest + 1
}

// advance delivers frames and gives up packets from head on, as far as the
// buffered packets and the time now allow.
func (a *Assembler) advance(now time.Time) {
	for a.started && a.head <= a.newest {
		p := a.at(a.head)
		switch {
		case p == nil: // missing packet at head
			r, ok := a.giveUp(a.head, now)
			if !ok {
				return
			}
			a.skipTo(a.nextStart(a.head), r, now)
		case p.kind == slotPadding:
			p.kind = slotEmpty
			a.head++
		case !p.desc.FrameStart():
			if !a.committed {
				// The frame start may still arrive reordered.
				if _, ok := a.giveUp(a.head-1, now); !ok {
					return
				}
			}
			a.dropOrphans(now)
		default:
			if !a.tryFrame(now) {
				return
			}
		}
	}
}

// dropOrphans drops the packets at head that belong to a frame whose start
// is behind head, up to a hole, a frame start, a new timestamp or past the
// marker. The first time a frame is met this way it is reported as a
// LossStartMissing; stragglers of a frame already reported are counted only.
func (a *Assembler) dropOrphans(now time.Time) {
	ts := a.at(a.head).ts
	end := a.head
	for end <= a.newest {
		p := a.at(end)
		if p == nil {
			break
		}
		if p.kind == slotMedia {
			if p.desc.FrameStart() || p.ts != ts {
				break
			}
			if p.marker {
				end++
				break
			}
		}
		end++
	}
	if a.lostOK && a.lostTS == ts {
		for e := a.head; e < end; e++ {
			if p := a.at(e); p != nil && p.kind == slotMedia {
				a.stats.DroppedPackets++
			}
			a.slots[e&a.mask].kind = slotEmpty
		}
		a.head = end
		a.committed = true
		return
	}
	a.skipTo(end, LossStartMissing, now)
}

// frameState is the result of scanning a frame from its start packet.
type frameState uint8

const (
	frameOpen     frameState = iota // ran to newest without an end
	frameHole                       // a sequence number is missing
	frameComplete                   // ends with a marker packet
	frameBoundary                   // ends before the next frame's start, no marker
	frameOversize                   // grew past MaxFrameBytes
)

// scanFrame scans the frame whose start packet is at start, from position
// from (with size octets of data before it), and returns where it stopped:
// the last packet for frameComplete, the next frame's first packet for
// frameBoundary, the hole for frameHole, the packet that overflowed for
// frameOversize, newest+1 for frameOpen; and the data size before that.
func (a *Assembler) scanFrame(start, from int64, size int) (frameState, int64, int) {
	ts := a.at(start).ts
	e := from
	for ; e <= a.newest; e++ {
		p := a.at(e)
		if p == nil {
			return frameHole, e, size
		}
		if p.kind == slotPadding {
			continue
		}
		if e != start && (p.ts != ts || p.desc.FrameStart()) {
			return frameBoundary, e, size
		}
		if size+len(p.data) > a.cfg.MaxFrameBytes {
			return frameOversize, e, size
		}
		size += len(p.data)
		if p.marker {
			return frameComplete, e, size
		}
	}
	return frameOpen, e, size
}

// tryFrame handles the frame starting at head; it reports whether head moved.
func (a *Assembler) tryFrame(now time.Time) bool {
	from, size := a.head, 0
	if a.scanHead == a.head {
		from, size = a.scanPos, a.scanSize
	}
	st, e, size := a.scanFrame(a.head, from, size)
	switch st {
	case frameComplete:
		a.deliver(e, false, now)
	case frameBoundary:
		a.deliver(e-1, true, now)
	case frameOversize:
		a.skipTo(a.nextStart(e), LossOversize, now)
	case frameHole:
		a.scanHead, a.scanPos, a.scanSize = a.head, e, size
		r, ok := a.giveUp(e, now)
		if !ok {
			return false
		}
		a.skipTo(a.nextStart(e), r, now)
	default: // frameOpen
		a.scanHead, a.scanPos, a.scanSize = a.head, e, size
		return false
	}
	return true
}

// giveUp decides whether the missing packet at h is lost, and why.
func (a *Assembler) giveUp(h int64, now time.Time) (LossReason, bool) {
	// Waiting for a repair pays only if the frames behind it can decode:
	// no keyframe is needed, or the frame at head is the keyframe.
	repair := a.cfg.RepairWait > 0
	if repair && a.needKey {
		p := a.at(a.head)
		repair = p != nil && p.kind == slotMedia && p.desc.FrameStart() && isKeyframeStart(p)
	}
	if a.newest-h >= int64(a.cfg.ReorderPackets) {
		return LossWindow, true
	}
	var earliest time.Time
	seen := false
	for e := h + 1; e <= a.newest; e++ {
		p := a.at(e)
		if p == nil || p.kind != slotMedia {
			continue
		}
		if !seen || p.arrival.Before(earliest) {
			earliest, seen = p.arrival, true
		}
	}
	for e := h + 1; e <= a.newest; e++ {
		p := a.at(e)
		if p == nil || p.kind != slotMedia || !p.desc.FrameStart() {
			continue
		}
		st, end, _ := a.scanFrame(e, e, 0)
		if (st == frameComplete || st == frameBoundary) && (!repair || isKeyframeStart(p)) {
			return LossNewerFrame, true
		}
		if end > e {
			e = end - 1
		}
	}
	wait := a.cfg.ReorderDelay
	if repair {
		wait = a.cfg.RepairWait
	}
	if seen && now.Sub(earliest) >= wait {
		return LossDeadline, true
	}
	return LossInvalid, false
}

// isKeyframeStart reports whether p, a frame's first packet, starts a
// keyframe: the P bit of the VP8 frame tag is 0 (RFC 6386 section 9.1).
func isKeyframeStart(p *slot) bool { return len(p.data) > 0 && p.data[0]&1 == 0 }

// skipTo gives up every sequence number from head to end-1 and reports them
// as one Loss with the given reason (if any packet was missing or dropped).
func (a *Assembler) skipTo(end int64, reason LossReason, now time.Time) {
	if end <= a.head {
		return
	}
	l := Loss{Reason: reason, FirstSeq: uint16(a.head), LastSeq: uint16(end - 1), Declared: now,
		HasPrev: a.prevOK, PrevRTPTimestamp: a.prevTS}
	last := end - 1
	if last > a.newest {
		l.Missing += int(last - a.newest)
		last = a.newest
	}
	for e := a.head; e <= last; e++ {
		p := a.at(e)
		switch {
		case p == nil:
			l.Missing++
		case p.kind == slotMedia:
			if !l.HasTimestamp {
				l.FirstRTPTimestamp = p.ts
				l.HasTimestamp = true
			}
			l.LastRTPTimestamp = p.ts
			l.Dropped++
		}
		a.slots[e&a.mask].kind = slotEmpty
	}
	a.head = end
	a.committed = true
	if l.Missing == 0 && l.Dropped == 0 {
		return // padding only
	}
	if l.HasTimestamp {
		a.lostTS, a.lostOK = l.LastRTPTimestamp, true
	}
	a.needKey = true
	a.stats.Losses++
	a.stats.byReason[reason]++
	a.stats.MissingPackets += uint64(l.Missing)
	a.stats.DroppedPackets += uint64(l.Dropped)
	a.sink.OnLoss(l)
}

// deliver assembles and delivers the frame from head to last.
func (a *Assembler) deliver(last int64, noMarker bool, now time.Time) {
	first := a.at(a.head)
	size := 0
	for e := a.head; e <= last; e++ {
		size += len(a.at(e).data)
	}
	a.frame = grow(a.frame, size, a.cfg.MaxFrameBytes)
	buf := a.frame[:0]
	f := Frame{
		RTPTimestamp:  first.ts,
		FirstSeq:      uint16(a.head),
		LastSeq:       uint16(last),
		HasPictureID:  first.desc.HasPictureID,
		PictureID:     first.desc.PictureID,
		NonReference:  first.desc.NonReference,
		MissingMarker: noMarker,
		ArrivalFirst:  first.arrival,
		ArrivalLast:   first.arrival,
	}
	parts := a.parts[:0]
	for e := a.head; e <= last; e++ {
		p := a.at(e)
		if p.kind != slotMedia {
			continue
		}
		off := len(buf)
		buf = append(buf, p.data...)
		parts = append(parts, Part{Desc: p.desc, Seq: uint16(e), Marker: p.marker, Data: buf[off:len(buf):len(buf)]})
		f.Packets++
		if p.arrival.Before(f.ArrivalFirst) {
			f.ArrivalFirst = p.arrival
		}
		if p.arrival.After(f.ArrivalLast) {
			f.ArrivalLast = p.arrival
		}
	}
	h, err := ParseFrameHeader(buf)
	if err != nil {
		a.skipTo(last+1, LossBadFrame, now)
		return
	}
	for e := a.head; e <= last; e++ {
		a.slots[e&a.mask].kind = slotEmpty
	}
	a.head = last + 1
	a.committed = true
	a.lostOK = false
	a.prevTS, a.prevOK = f.RTPTimestamp, true
	a.parts = parts
	f.Data = buf
	f.Parts = parts
	f.Keyframe = h.Keyframe
	f.ShowFrame = h.ShowFrame
	if h.Keyframe {
		f.Width, f.Height = h.Width, h.Height
		a.needKey = false
		a.stats.Keyframes++
	} else {
		f.RefsMissing = a.needKey
	}
	if noMarker {
		a.stats.MissingMarker++
	}
	a.stats.Frames++
	a.sink.OnFrame(f)
}

// grow returns b resized to n octets, reusing its array when it is large
// enough; a new array has capacity min(max(n, 2*cap(b), 256), limit) (n is
// never above limit), so capacities never exceed the configured limits.
func grow(b []byte, n, limit int) []byte {
	if n <= cap(b) {
		return b[:n]
	}
	c := max(n, 2*cap(b), 256)
	c = min(c, limit)
	return make([]byte, n, max(c, n))
}

// memBytes returns the capacity of all buffers holding packet and frame
// data, for tests of the memory bound.
func (a *Assembler) memBytes() int {
	n := cap(a.frame)
	for i := range a.slots {
		n += cap(a.slots[i].data)
	}
	return n
}
