package telemetry

import (
	"context"
	"errors"
	"fmt"
	"net"
	"sync/atomic"
	"time"
)

// ReasonOf returns the Reason of a decoding error from [Decode], or
// ReasonInvalid if err is not a [*DecodeError]. It helps callers that decode
// data channel messages themselves count rejections the same way
// [Receiver] does.
func ReasonOf(err error) Reason {
	var de *DecodeError
	if errors.As(err, &de) {
		return de.Reason
	}
	return ReasonInvalid
}

// Counts are the counters of a [Receiver].
type Counts struct {
	// Accepted counts datagrams decoded and handed to Handle.
	Accepted uint64
	rejected [reasonCount]uint64
}

// Rejected returns the number of datagrams rejected for reason r.
func (c Counts) Rejected(r Reason) uint64 {
	if int(r) < len(c.rejected) {
		return c.rejected[r]
	}
	return 0
}

// RejectedTotal returns the number of datagrams rejected for any reason.
func (c Counts) RejectedTotal() uint64 {
	var n uint64
	for _, v := range c.rejected {
		n += v
	}
	return n
}

// Receiver reads telemetry messages, one per datagram, from a
// [net.PacketConn] (for vehicles that send UDP rather than use a WebRTC
// data channel). The zero value needs only Handle set. Counts may be read
// from any goroutine while Serve runs.
type Receiver struct {
	// Handle receives each decoded message with its sender's address and
	// its arrival time on the receiver clock. It is called from the Serve
	// goroutine and should return quickly. Required.
	Handle func(m Message, from net.Addr, arrival time.Time)
	// Reject, if set, receives each rejected datagram's error (a
	// [*DecodeError]) and sender. Rejections are counted either way.
	Reject func(err error, from net.Addr)
	// Now is the receiver clock used for arrival times; nil means
	// time.Now.
	Now func() time.Time

	accepted atomic.Uint64
	rejected [reasonCount]atomic.Uint64
}

// Counts returns a snapshot of the counters.
func (r *Receiver) Counts() Counts {
	c := Counts{Accepted: r.accepted.Load()}
	for i := range r.rejected {
		c.rejected[i] = r.rejected[i].Load()
	}
	return c
}

// Serve reads datagrams from conn until ctx is cancelled or reading fails,
// decodes each with [Decode] and hands it to Handle. A datagram longer than
// [MaxMessageBytes] is rejected as [ReasonTooLarge] without being decoded;
// the read buffer is MaxMessageBytes+1 octets, allocated once.
//
// Serve returns ctx.Err() after cancellation, leaving conn's read deadline in
// the past (reset it to reuse conn), or the read error otherwise. It does not
// close conn.
func (r *Receiver) Serve(ctx context.Context, conn net.PacketConn) error {
	if r.Handle == nil {
		return ErrNoHandler
	}
	now := r.Now
	if now == nil {
		now = time.Now
	}
	stop := context.AfterFunc(ctx, func() {
		// A deadline in the past unblocks a pending read at once.
		_ = conn.SetReadDeadline(time.Unix(1, 0))
	})
	defer stop()
	buf := make([]byte, MaxMessageBytes+1)
	for {
		n, from, err := conn.ReadFrom(buf)
		if ctx.Err() != nil {
			return ctx.Err()
		}
		if err != nil {
			return fmt.Errorf("telemetry: reading datagrams: %w", err)
		}
		arrival := now()
		var m Message
		if n > MaxMessageBytes {
			err = &DecodeError{Reason: ReasonTooLarge, Offset: MaxMessageBytes,
				Detail: fmt.Sprintf("datagram longer than %d octets", MaxMessageBytes)}
		} else {
			m, err = Decode(buf[:n])
		}
		if err != nil {
			r.rejected[ReasonOf(err)].Add(1)
			if r.Reject != nil {
				r.Reject(err, from)
			}
			continue
		}
		r.accepted.Add(1)
		r.Handle(m, from, arrival)
	}
}
