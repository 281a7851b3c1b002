package filter

import (
	"errors"
	"math"
	"testing"
)

func commandFilter(t testing.TB, act Actuator) *Filter {
	t.Helper()
	f, err := New(Config{Model: ModelBicycle, WheelbaseM: 2.7, Actuator: act})
	if err != nil {
		t.Fatal(err)
	}
	return f
}

// TestCommandLagClosedForm: after one telemetry sample, a command held
// from its arrival moves the steer and speed estimates along the
// first-order lags exactly: δ(t) = δc + (δ0 − δc)·exp(−(t − t0 − D)/τ),
// the closed form of dδ/dt = (δc − δ)/τ (and alike for speed); before
// t0 + D nothing changes.
func TestCommandLagClosedForm(t *testing.T) {
	act := Actuator{DelayUs: 100_000, SteerLagS: 0.2, SpeedLagS: 0.5}
	f := commandFilter(t, act)
	if err := f.Add(Sample{TimeUs: 0, SpeedMps: 10, SteerRad: 0, HasSteer: true}); err != nil {
		t.Fatal(err)
	}
	if err := f.AddCommand(Command{TimeUs: 50_000, SteerRad: 0.1, SpeedMps: 12, HasSpeed: true}); err != nil {
		t.Fatal(err)
	}
	for _, tUs := range []int64{100_000, 150_000, 163_000, 400_000, 1_000_000} {
		st, err := f.Predict(tUs)
		if err != nil {
			t.Fatal(err)
		}
		dt := math.Max(0, float64(tUs-150_000)*1e-6)
		wantD := 0.1 + (0-0.1)*math.Exp(-dt/act.SteerLagS)
		wantV := 12 + (10-12)*math.Exp(-dt/act.SpeedLagS)
		if math.Abs(st.Vec[IdxTurn]-wantD) > 1e-12 || math.Abs(st.Vec[IdxSpeed]-wantV) > 1e-12 {
			t.Errorf("t=%d us: steer %.15f speed %.15f, want %.15f and %.15f", tUs, st.Vec[IdxTurn], st.Vec[IdxSpeed], wantD, wantV)
		}
	}
	// Without the command the state is held (no acceleration known).
	g := commandFilter(t, act)
	g.Add(Sample{TimeUs: 0, SpeedMps: 10, SteerRad: 0, HasSteer: true})
	if st, _ := g.Predict(1_000_000); st.Vec[IdxTurn] != 0 || st.Vec[IdxSpeed] != 10 {
		t.Errorf("no command: %v", st.Vec)
	}
}

// TestCommandMotionMatchesArc: with zero lags a command is followed at
// once after the delay, and Relative over the gap is the arc of the
// kinematic bicycle: yaw change v·tan(δ)/L·T.
func TestCommandMotionMatchesArc(t *testing.T) {
	f := commandFilter(t, Actuator{})
	f.Add(Sample{TimeUs: 0, SpeedMps: 8, SteerRad: 0, HasSteer: true})
	f.AddCommand(Command{TimeUs: 1, SteerRad: 0.05, SpeedMps: 8, HasSpeed: true})
	m, err := f.Relative(0, 500_000)
	if err != nil {
		t.Fatal(err)
	}
	want := 8 * math.Tan(0.05) / 2.7 * (0.5 - 1e-6)
	if math.Abs(m.DyawRad-want) > 1e-9 {
		t.Errorf("yaw change %.12f, want %.12f", m.DyawRad, want)
	}
}

// TestCommandMotionCarriesSlip: telemetry at 100 Hz of a vehicle driving
// straight on commands whose gyro shows a steady 0.01 rad/s the steering
// does not explain (tyre slip); Relative over an interval covered by those
// samples, and over a gap after them, turns the yaw by that rate, as the
// samples' own yaw rates integrate to (within 2 %), not by the commands'
// zero alone.
func TestCommandMotionCarriesSlip(t *testing.T) {
	const slip = 0.01
	f := commandFilter(t, Actuator{})
	f.AddCommand(Command{TimeUs: 1, SteerRad: 0, SpeedMps: 10, HasSpeed: true})
	for us := int64(0); us <= 1_000_000; us += 10_000 {
		if err := f.Add(Sample{TimeUs: us, SpeedMps: 10, YawRateRps: slip, SteerRad: 0, HasSteer: true}); err != nil {
			t.Fatal(err)
		}
	}
	for _, iv := range [][2]int64{{500_000, 1_000_000}, {1_000_000, 1_300_000}} {
		m, err := f.Relative(iv[0], iv[1])
		if err != nil {
			t.Fatal(err)
		}
		want := slip * float64(iv[1]-iv[0]) * 1e-6
		if math.Abs(m.DyawRad-want) > 0.02*want {
			t.Errorf("Relative(%d, %d): yaw change %.6f, want %.6f", iv[0], iv[1], m.DyawRad, want)
		}
	}
}

// TestAddCommandRejects: NaN, out-of-range values and times that do not
// increase are rejected, counted per reason and leave the filter unchanged.
func TestAddCommandRejects(t *testing.T) {
	f := commandFilter(t, Actuator{SteerLagS: 0.1})
	f.Add(Sample{TimeUs: 0, SpeedMps: 5})
	if err := f.AddCommand(Command{TimeUs: 10, SteerRad: 0.1}); err != nil {
		t.Fatal(err)
	}
	before, _ := f.Predict(500_000)
	tests := []struct {
		name string
		c    Command
		want error
	}{
		{"NaN steer", Command{TimeUs: 20, SteerRad: math.NaN()}, ErrNotFinite},
		{"Inf speed", Command{TimeUs: 20, SpeedMps: math.Inf(1), HasSpeed: true}, ErrNotFinite},
		{"steer beyond the limit", Command{TimeUs: 20, SteerRad: 2}, ErrOutOfRange},
		{"same time", Command{TimeUs: 10, SteerRad: -0.1}, ErrOutOfOrder},
		{"older", Command{TimeUs: 5, SteerRad: -0.1}, ErrOutOfOrder},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			err := f.AddCommand(tc.c)
			var re *RejectError
			if !errors.Is(err, tc.want) || !errors.As(err, &re) || !re.Command {
				t.Errorf("got %v, want a command rejection wrapping %v", err, tc.want)
			}
		})
	}
	got := f.CommandsRejected()
	if got != (Counts{NotFinite: 2, OutOfRange: 1, OutOfOrder: 2}) {
		t.Errorf("counts %+v", got)
	}
	if f.Rejected().Total() != 0 {
		t.Errorf("command rejections counted as telemetry: %+v", f.Rejected())
	}
	if after, _ := f.Predict(500_000); after.Vec != before.Vec {
		t.Errorf("state changed by rejected commands: %v -> %v", before.Vec, after.Vec)
	}
}

// TestLateCommandRefilters: a command whose effect time is before
// telemetry already applied gives the same estimate as if it had come
// first.
func TestLateCommandRefilters(t *testing.T) {
	act := Actuator{DelayUs: 20_000, SteerLagS: 0.1, SpeedLagS: 0.3}
	feed := func(commandFirst bool) State {
		f := commandFilter(t, act)
		c := Command{TimeUs: 5_000, SteerRad: 0.05, SpeedMps: 9, HasSpeed: true}
		if commandFirst {
			f.AddCommand(c)
		}
		for k := int64(0); k < 20; k++ {
			f.Add(Sample{TimeUs: k * 10_000, SpeedMps: 8 + 0.01*float64(k), YawRateRps: 0.002 * float64(k), SteerRad: 0.002 * float64(k), HasSteer: true})
		}
		if !commandFirst {
			f.AddCommand(c)
		}
		st, err := f.Predict(400_000)
		if err != nil {
			t.Fatal(err)
		}
		return st
	}
	a, b := feed(true), feed(false)
	for i := range a.Vec {
		if math.Abs(a.Vec[i]-b.Vec[i]) > 1e-9 {
			t.Fatalf("command first %v, command last %v", a.Vec, b.Vec)
		}
	}
}

// FuzzAddCommand: any command and sample sequence leaves a finite state
// and every rejection is counted.
func FuzzAddCommand(f *testing.F) {
	f.Add(int64(10), 0.1, 5.0, true, int64(100_000), 0.2, 0.5)
	f.Add(int64(-5), math.NaN(), 0.0, false, int64(0), 0.0, 0.0)
	f.Add(int64(1)<<62, 1.2, 120.0, true, int64(2_000_000), 10.0, 10.0)
	f.Fuzz(func(t *testing.T, tUs int64, steer, speed float64, hasSpeed bool, delayUs int64, lagS, lagV float64) {
		flt, err := New(Config{Model: ModelBicycle, WheelbaseM: 2.7, Actuator: Actuator{DelayUs: delayUs, SteerLagS: lagS, SpeedLagS: lagV}})
		if err != nil {
			return // bad actuator config: New refuses it
		}
		flt.Add(Sample{TimeUs: 0, SpeedMps: 10})
		rejected := 0
		for k := int64(0); k < 3; k++ {
			if err := flt.AddCommand(Command{TimeUs: tUs + k*30_000, SteerRad: steer, SpeedMps: speed, HasSpeed: hasSpeed}); err != nil {
				rejected++
			}
		}
		if got := flt.CommandsRejected().Total(); got != uint64(rejected) {
			t.Fatalf("%d rejections, %d counted", rejected, got)
		}
		st, err := flt.Predict(1_000_000)
		if err != nil {
			t.Fatal(err)
		}
		for _, v := range st.Vec {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				t.Fatalf("state %v", st.Vec)
			}
		}
	})
}
