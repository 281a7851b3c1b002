package ingest

import (
	"context"
	"errors"
	"testing"
	"time"

	"github.com/pion/rtp"
)

// TestReadQueued: packets queued before the session ended come out first,
// in order, then the ingest's own closed error; a cancelled context ends
// a read that has nothing queued.
func TestReadQueued(t *testing.T) {
	errClosed := errors.New("test ingest: closed")
	q := make(chan Arrival, 4)
	done := make(chan struct{})
	t0 := time.Unix(100, 0)
	for i := range 3 {
		q <- Arrival{Packet: &rtp.Packet{Header: rtp.Header{SequenceNumber: uint16(i)}}, At: t0.Add(time.Duration(i) * time.Millisecond)}
	}
	close(done)
	for i := range 3 {
		p, at, err := ReadQueued(context.Background(), q, done, errClosed)
		if err != nil || p.SequenceNumber != uint16(i) || !at.Equal(t0.Add(time.Duration(i)*time.Millisecond)) {
			t.Fatalf("read %d: packet %v at %v, err %v; want seq %d", i, p, at, err, i)
		}
	}
	if _, _, err := ReadQueued(context.Background(), q, done, errClosed); !errors.Is(err, errClosed) {
		t.Fatalf("after the queue emptied: err %v, want %v", err, errClosed)
	}

	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, _, err := ReadQueued(ctx, make(chan Arrival), make(chan struct{}), errClosed); !errors.Is(err, context.Canceled) {
		t.Fatalf("cancelled context: err %v, want context.Canceled", err)
	}
}
