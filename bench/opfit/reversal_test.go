package opfit

import (
	"math"
	"testing"
)

// TestButterworthResponse checks the filter against its definition: a
// second-order Butterworth low-pass has gain 1 at DC, 1/√2 (-3 dB) at the
// cutoff, |H|² = 1/(1 + (f/fc)^4) for the analog prototype, matched by the
// bilinear design at the prewarped frequency tan(πf/fs) (Oppenheim and
// Schafer, section 7.1).
func TestButterworthResponse(t *testing.T) {
	const fs, fc = 100.0, 0.6
	q := NewButterworth2(fc, fs)
	for _, f := range []float64{0, 0.1, 0.6, 2, 10, 40} {
		r := math.Tan(math.Pi*f/fs) / math.Tan(math.Pi*fc/fs)
		want := 1 / math.Sqrt(1+r*r*r*r)
		if got := q.Gain(f, fs); math.Abs(got-want) > 1e-9 {
			t.Errorf("gain at %g Hz = %.12f, want %.12f", f, got, want)
		}
	}
	if g := q.Gain(fc, fs); math.Abs(g-1/math.Sqrt2) > 1e-12 {
		t.Errorf("gain at the cutoff %g, want 1/√2", g)
	}
	// The filter as run (time domain) matches the response: a 2 Hz sine
	// through FiltFilt comes out scaled by |H|² and in phase.
	n := 4000
	x := make([]float64, n)
	for i := range x {
		x[i] = math.Sin(2 * math.Pi * 2 * float64(i) / fs)
	}
	FiltFilt(q, x)
	g := q.Gain(2, fs)
	for i := 1000; i < 3000; i++ {
		want := g * g * math.Sin(2*math.Pi*2*float64(i)/fs)
		if math.Abs(x[i]-want) > 1e-6 {
			t.Fatalf("sample %d: %g, want %g (|H|² in phase)", i, x[i], want)
		}
	}
}

// TestReversalWorkedCase: a steering signal that passes slowly (2 s per
// half swing, far below the 0.6 Hz filter) through the steering-wheel
// extremes 0, 3, 2.2, 4.5, -1, -0.3, 2.5 degrees. By the counting rule of
// Markkula and Engström (2006) (see ReversalCount) with a 2 degree gap:
// upward 0→3 (3), 2.2→4.5 (2.3), -1→2.5 (3.5): 3; downward 4.5→-1 (5.5): 1;
// total 4. With a 5 degree gap only the 5.5 degree swing counts (1); with
// 6, none. The filter shrinks these slow swings by under 3%, which moves no
// swing across its gap.
func TestReversalWorkedCase(t *testing.T) {
	extremesDeg := []float64{0, 3, 2.2, 4.5, -1, -0.3, 2.5}
	const fs = 50.0
	const ratio = 16.0
	per := int(2 * fs) // samples per half swing
	var steer []float64
	// Hold 2 s at each end so the filter's start and end are settled.
	hold := func(v float64) {
		for i := 0; i < per; i++ {
			steer = append(steer, v/ratio*math.Pi/180)
		}
	}
	hold(extremesDeg[0])
	for k := 1; k < len(extremesDeg); k++ {
		a, b := extremesDeg[k-1], extremesDeg[k]
		for i := 1; i <= per; i++ {
			s := 0.5 - 0.5*math.Cos(math.Pi*float64(i)/float64(per))
			steer = append(steer, (a+(b-a)*s)/ratio*math.Pi/180)
		}
	}
	hold(extremesDeg[len(extremesDeg)-1])
	tests := []struct {
		gapDeg         float64
		up, down, want int
	}{
		{2, 3, 1, 4},
		{5, 0, 1, 1},
		{6, 0, 0, 0},
	}
	for _, tc := range tests {
		r, err := ReversalCount(steer, 0, int64(1e6/fs), ReversalConfig{GapDeg: tc.gapDeg, SteeringRatio: ratio})
		if err != nil {
			t.Fatal(err)
		}
		if r.Up != tc.up || r.Down != tc.down || r.Total() != tc.want {
			t.Errorf("gap %g°: up %d down %d total %d, want %d %d %d", tc.gapDeg, r.Up, r.Down, r.Total(), tc.up, tc.down, tc.want)
		}
	}
	// Unit conversion: the same signal read as a steering-wheel angle
	// (ratio 1) is 16 times smaller: no swing reaches 2 degrees.
	r, err := ReversalCount(steer, 0, int64(1e6/fs), ReversalConfig{SteeringRatio: 1})
	if err != nil || r.Total() != 0 {
		t.Errorf("ratio 1: %d reversals, %v; want 0", r.Total(), err)
	}
}

// TestReversalIgnoresFastJitter: jitter at 5 Hz of ±3° (above the gap but
// far above the 0.6 Hz filter, whose forward-backward gain there is about
// 2e-4) counts nothing.
func TestReversalIgnoresFastJitter(t *testing.T) {
	const fs = 50.0
	steer := make([]float64, 500)
	for i := range steer {
		steer[i] = 3 * math.Sin(2*math.Pi*5*float64(i)/fs) / 16 * math.Pi / 180
	}
	r, err := ReversalCount(steer, 0, int64(1e6/fs), ReversalConfig{})
	if err != nil || r.Total() != 0 {
		t.Errorf("%d reversals, %v; want 0", r.Total(), err)
	}
}

// TestPurePursuitCircle: on a circle of radius R with the goal point on it,
// pure pursuit commands exactly atan(L/R) (Coulter 1992: the arc through
// the goal point is the circle itself).
func TestPurePursuitCircle(t *testing.T) {
	const r, l = 50.0, 2.7
	var path Path
	for a := 0.0; a < math.Pi; a += 0.001 {
		path.XM = append(path.XM, r*math.Sin(a))
		path.YM = append(path.YM, r-r*math.Cos(a))
	}
	pp := PurePursuit{LookaheadM: 8, WheelbaseM: l}
	hint := 0
	for _, a := range []float64{0, 0.3, 1.2} {
		p := Pose{XM: r * math.Sin(a), YM: r - r*math.Cos(a), YawRad: a}
		got, err := pp.Steer(path, p, &hint)
		if err != nil {
			t.Fatal(err)
		}
		// The goal is the first sample at least Ld away: up to one 5 cm
		// step beyond, which changes nothing on a circle.
		if want := math.Atan(l / r); math.Abs(got-want) > 1e-9 {
			t.Errorf("at %g rad: δ = %.12f, want atan(L/R) = %.12f", a, got, want)
		}
	}
	// Offset 0.5 m to the right of a straight path, heading along it: goal
	// at (Ld cos, 0.5 left): δ = atan(2 L · 0.5 / Ld²) to first order.
	var straight Path
	for i := 0; i <= 1000; i++ {
		straight.XM = append(straight.XM, float64(i)*0.1)
		straight.YM = append(straight.YM, 0)
	}
	hint = 0
	got, _ := pp.Steer(straight, Pose{XM: 10, YM: -0.5}, &hint)
	gx := math.Sqrt(64 - 0.25)
	want := math.Atan(2 * l * math.Sin(math.Atan2(0.5, gx)) / 8)
	if math.Abs(got-want) > 1e-3 { // the goal is up to one 0.1 m step beyond Ld
		t.Errorf("offset case: δ = %g, want %g", got, want)
	}
}

// TestReversalRates: the worked-case signal (4 reversals with a 2° gap)
// under ticks that are all LIVE gives 4 reversals over the signal's
// duration, per minute, and no rate for states never shown.
func TestReversalRates(t *testing.T) {
	extremesDeg := []float64{0, 3, 2.2, 4.5, -1, -0.3, 2.5}
	const fs, ratio = 50.0, 16.0
	per := int(2 * fs)
	var s Session
	add := func(v float64) {
		n := len(s.Controls)
		s.Controls = append(s.Controls, Control{TUs: int64(n) * 20_000, SteerRad: v / ratio * math.Pi / 180})
	}
	for i := 0; i < per; i++ {
		add(extremesDeg[0])
	}
	for k := 1; k < len(extremesDeg); k++ {
		a, b := extremesDeg[k-1], extremesDeg[k]
		for i := 1; i <= per; i++ {
			add(a + (b-a)*(0.5-0.5*math.Cos(math.Pi*float64(i)/float64(per))))
		}
	}
	for i := 0; i < per; i++ {
		add(extremesDeg[len(extremesDeg)-1])
	}
	for tUs := int64(-1_000_000); tUs < s.Controls[len(s.Controls)-1].TUs+1_000_000; tUs += 33_333 {
		s.Ticks = append(s.Ticks, Tick{DisplayUs: tUs, Shown: ShownLive, Confidence: 1})
	}
	rates, err := ReversalRates([]Session{s}, 250, ReversalConfig{SteeringRatio: ratio})
	if err != nil {
		t.Fatal(err)
	}
	durS := float64(s.Controls[len(s.Controls)-1].TUs-s.Controls[0].TUs) / 1e6
	if want := 4 / durS * 60; math.Abs(rates[ShownLive]-want) > 1e-9 {
		t.Errorf("LIVE rate %g per minute, want %g (4 reversals in %g s)", rates[ShownLive], want, durS)
	}
	if !math.IsNaN(rates[ShownPredicted]) || !math.IsNaN(rates[ShownStale]) {
		t.Errorf("rates for states never shown: %v, want NaN", rates)
	}
}
