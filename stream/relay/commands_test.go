package relay

import (
	"context"
	"fmt"
	"math"
	"net/http"
	"net/http/httptest"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/pion/rtp"

	"stopgap/filter"
	"stopgap/stream/whip"
)

// silentVehicle is a fakeVehicle whose link goes silent after its frames
// (an outage: no packets, no telemetry) instead of ending the session.
type silentVehicle struct {
	*fakeVehicle
	once   sync.Once
	silent chan struct{} // closed when the last frame has been delivered
}

func (s *silentVehicle) ReadRTP(ctx context.Context) (*rtp.Packet, time.Time, error) {
	if len(s.pkts) == 0 && s.next >= s.frames {
		s.once.Do(func() { close(s.silent) })
		select {
		case <-ctx.Done():
			return nil, time.Time{}, ctx.Err()
		case <-s.done:
			return nil, time.Time{}, whip.ErrSessionClosed
		}
	}
	return s.fakeVehicle.ReadRTP(ctx)
}

// TestCommandsOverChannelSteerFilter: end to end through the relay's
// operator command channel (the handler the relay service serves at
// /api/controls). A vehicle drives at 8 m/s and 0.05 rad/s (its
// telemetry), then its link goes silent. The operator's commands are
// posted during the outage: with a wrong token they are refused and the
// session's filter does not change; with the console token they reach the
// filter, and its predicted heading change over the outage follows the
// commanded steering: left for a left command, right for a right one, of
// the size the bicycle model gives (v tan(δ)/L after the uplink delay and
// the steering lag, integrated in closed form below).
func TestCommandsOverChannelSteerFilter(t *testing.T) {
	const (
		wheelbaseM = 2.7
		delayUs    = 100_000
		steerLagS  = 0.1
		steerRad   = 0.1
		outageUs   = 600_000
		frames     = 30
	)
	for _, tc := range []struct {
		name string
		sign float64
	}{{"left", 1}, {"right", -1}} {
		t.Run(tc.name, func(t *testing.T) {
			clock := &fakeClock{}
			r, err := New(Config{
				FPS: testFPS, Camera: testCamera(), IngestToken: testIngestToken, ConsoleToken: testConsoleToken,
				Filter: filter.Config{Model: filter.ModelBicycle, WheelbaseM: wheelbaseM,
					Actuator: filter.Actuator{DelayUs: delayUs, SteerLagS: steerLagS}},
				Logger: quietLogger(), Now: clock.Now, NewTimer: newIdleTimer, FrameQueue: 64,
			})
			if err != nil {
				t.Fatal(err)
			}
			defer r.shutdown()
			v := &silentVehicle{fakeVehicle: newFakeVehicle(t, clock, frames, nil), silent: make(chan struct{})}
			ctx, cancel := context.WithCancel(context.Background())
			served := make(chan error, 1)
			go func() { served <- r.Serve(ctx, v) }()
			defer func() {
				cancel()
				<-served
			}()
			select {
			case <-v.silent:
			case <-time.After(30 * time.Second):
				t.Fatal("the vehicle's frames were not read within 30 s")
			}
			r.mu.Lock()
			flt := r.cmdFlt
			r.mu.Unlock()
			if flt == nil {
				t.Fatal("no session filter while the session is served")
			}
			// The outage starts after the last frame; the display loop
			// may still be taking the last frames and samples in: wait
			// until the filter's prediction holds still.
			t0 := captureUs(frames - 1)
			var before filter.Motion
			for still, deadline := 0, time.Now().Add(10*time.Second); still < 3; {
				m, err := flt.Relative(t0, t0+outageUs)
				if err != nil {
					t.Fatal(err)
				}
				if m == before {
					still++
				} else {
					still, before = 0, m
				}
				if time.Now().After(deadline) {
					t.Fatal("the session's filter kept changing during the outage")
				}
				time.Sleep(50 * time.Millisecond)
			}

			srv := httptest.NewServer(r.ControlsChannel(nil, nil))
			defer srv.Close()
			var body strings.Builder
			for k := 0; k*20_000 <= outageUs; k++ {
				fmt.Fprintf(&body, `{"t_us": %d, "operator": "default", "steer_rad": %g, "throttle": 0.1, "brake": 0}`+"\n",
					t0+int64(k)*20_000, tc.sign*steerRad)
			}
			post := func(token string) int {
				req, _ := http.NewRequest(http.MethodPost, srv.URL, strings.NewReader(body.String()))
				req.Header.Set("Authorization", "Bearer "+token)
				req.Header.Set("Content-Type", "application/x-ndjson")
				res, err := srv.Client().Do(req)
				if err != nil {
					t.Fatal(err)
				}
				res.Body.Close()
				return res.StatusCode
			}
			if code := post("not-the-console-token"); code != http.StatusUnauthorized {
				t.Fatalf("commands with a wrong token: status %d, want 401", code)
			}
			if got, err := flt.Relative(t0, t0+outageUs); err != nil || got != before {
				t.Fatalf("refused commands changed the filter: %+v, %v; want %+v", got, err, before)
			}
			if code := post(testConsoleToken); code != http.StatusOK {
				t.Fatalf("commands with the console token: status %d, want 200", code)
			}
			after, err := flt.Relative(t0, t0+outageUs)
			if err != nil {
				t.Fatal(err)
			}
			// Heading change of the bicycle model at the held speed: the
			// telemetry's yaw rate until the command takes effect, then
			// the road-wheel angle moves from δ0 towards δ with time
			// constant T: δ(s) = δ + (δ0 - δ) e^(-s/T); with tan δ ≈ δ
			// (|δ| ≤ 0.1 rad: 0.3 % error) the yaw rate is v δ(s)/L.
			const speed, yawRate0 = 8.0, 0.05
			d0 := math.Atan(yawRate0 * wheelbaseM / speed)
			d := tc.sign * steerRad
			tau := float64(outageUs-delayUs) * 1e-6
			want := yawRate0*delayUs*1e-6 + speed/wheelbaseM*(d*tau+(d0-d)*steerLagS*(1-math.Exp(-tau/steerLagS)))
			t.Logf("heading change over %d ms: %.4f rad without commands, %.4f with (bicycle model %.4f)",
				outageUs/1000, before.DyawRad, after.DyawRad, want)
			if math.Abs(after.DyawRad-want) > 0.1*math.Abs(want) {
				t.Errorf("heading change over the outage %.4f rad, want %.4f ± 10 %% (steering %+.2f rad)", after.DyawRad, want, d)
			}
			if tc.sign*(after.DyawRad-before.DyawRad) < 0.05 {
				t.Errorf("heading change %.4f rad with the commands, %.4f without: want it %s by more than 0.05 rad", after.DyawRad, before.DyawRad, tc.name)
			}
		})
	}
}
