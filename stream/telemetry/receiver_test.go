package telemetry

import (
	"context"
	"errors"
	"net"
	"strings"
	"sync"
	"testing"
	"time"
)

// TestReceiverLoopback sends datagrams over 127.0.0.1 and checks what
// arrives, what is rejected and that cancellation ends Serve.
func TestReceiverLoopback(t *testing.T) {
	conn, err := net.ListenPacket("udp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	fixed := time.Date(2025, 3, 1, 0, 0, 0, 0, time.UTC)
	var mu sync.Mutex
	var got []Message
	var rejected []Reason
	all := make(chan struct{})
	const total = 5
	note := func() {
		if len(got)+len(rejected) == total {
			close(all)
		}
	}
	r := &Receiver{
		Handle: func(m Message, from net.Addr, arrival time.Time) {
			mu.Lock()
			defer mu.Unlock()
			if !arrival.Equal(fixed) {
				t.Errorf("arrival %v, want the injected clock's %v", arrival, fixed)
			}
			got = append(got, m)
			note()
		},
		Reject: func(err error, from net.Addr) {
			mu.Lock()
			defer mu.Unlock()
			rejected = append(rejected, ReasonOf(err))
			note()
		},
		Now: func() time.Time { return fixed },
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- r.Serve(ctx, conn) }()

	client, err := net.Dial("udp", conn.LocalAddr().String())
	if err != nil {
		t.Fatal(err)
	}
	defer client.Close()
	for _, d := range []string{
		`{"t_us":1,"speed_mps":2,"yaw_rate_rps":0.1}`,
		`{"t_us":2,"speed_mps":2}`,
		`{"t_us":3,"speed_mps":2,"yaw_rate_rps":0.1,"pad":"` + strings.Repeat("x", 1400) + `"}`,
		`not json`,
		`{"t_us":4,"speed_mps":2.5,"yaw_rate_rps":0.2,"seq":7}`,
	} {
		if _, err := client.Write([]byte(d)); err != nil {
			t.Fatal(err)
		}
	}
	select {
	case <-all:
	case <-time.After(5 * time.Second):
		t.Fatal("datagrams did not all arrive over loopback within 5 s")
	}
	cancel()
	select {
	case err := <-done:
		if !errors.Is(err, context.Canceled) {
			t.Errorf("Serve returned %v, want context.Canceled", err)
		}
	case <-time.After(5 * time.Second):
		t.Fatal("Serve did not return after cancel")
	}
	mu.Lock()
	defer mu.Unlock()
	if len(got) != 2 || got[0].TimeUs != 1 || got[1].Seq != 7 || !got[1].HasSeq {
		t.Errorf("got %+v", got)
	}
	c := r.Counts()
	if c.Accepted != 2 || c.Rejected(ReasonMissingField) != 1 || c.Rejected(ReasonTooLarge) != 1 ||
		c.Rejected(ReasonSyntax) != 1 || c.RejectedTotal() != 3 {
		t.Errorf("counts %+v (rejected reasons seen %v)", c, rejected)
	}
}

func TestReceiverNeedsHandler(t *testing.T) {
	var r Receiver
	if err := r.Serve(context.Background(), nil); !errors.Is(err, ErrNoHandler) {
		t.Errorf("err = %v, want ErrNoHandler", err)
	}
}
