package simvehicle

import (
	"context"
	"time"
)

// Clock is the vehicle's time source: when to play each frame and telemetry
// row, when the link releases a packet, and where outages are. Tests inject
// a fake one.
type Clock interface {
	// Now returns the current vehicle time.
	Now() time.Time
	// WaitUntil blocks until Now() >= t or ctx ends (then it returns ctx.Err()).
	WaitUntil(ctx context.Context, t time.Time) error
}

// SystemClock is the Clock backed by the time package. The zero value is
// ready to use.
type SystemClock struct{}

// Now returns time.Now().
func (SystemClock) Now() time.Time { return time.Now() }

// WaitUntil sleeps until t or until ctx ends.
func (SystemClock) WaitUntil(ctx context.Context, t time.Time) error {
	d := time.Until(t)
	if d <= 0 {
		return ctx.Err()
	}
	tm := time.NewTimer(d)
	defer tm.Stop()
	select {
	case <-tm.C:
		return nil
	case <-ctx.Done():
		return ctx.Err()
	}
}
