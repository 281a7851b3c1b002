package opfit

import (
	"math"
	"path/filepath"
	"testing"

	"stopgap/bench/simdrive"
)

// TestLoadSessionRoundTrip: a simulated drive written as a relay recording
// and read back by LoadSession gives the same ticks and controls (shifted by
// the station-to-relay mapping, which the written delay makes exactly 1 ms
// after the station clock's +1 us), poses within the interpolation error
// between frames, and the same gap costs within 2%.
func TestLoadSessionRoundTrip(t *testing.T) {
	co, err := NewCourse(simdrive.Config{DurationS: 20})
	if err != nil {
		t.Fatal(err)
	}
	op := SimOperator{DelayMs: 200, NoiseRad: 0.003, Misled: 1, LookaheadM: 10}
	r, err := co.Simulate(op, simLink(0.5, 3))
	if err != nil {
		t.Fatal(err)
	}
	dir := filepath.Join(t.TempDir(), "drive")
	if err := co.WriteRecording(dir, r); err != nil {
		t.Fatal(err)
	}
	s, err := LoadSession(dir)
	if err != nil {
		t.Fatal(err)
	}
	if len(s.Ticks) != len(r.Session.Ticks) {
		t.Fatalf("%d ticks, want %d", len(s.Ticks), len(r.Session.Ticks))
	}
	for i, tk := range s.Ticks {
		w := r.Session.Ticks[i]
		if tk.DisplayUs != w.DisplayUs || tk.Shown != w.Shown || math.Abs(tk.Confidence-w.Confidence) > 5e-5 || tk.Cutoff != w.Cutoff {
			t.Fatalf("tick %d: %+v, want %+v", i, tk, w)
		}
	}
	for i, c := range s.Controls {
		w := r.Session.Controls[i]
		if c.TUs != w.TUs+1001 || c.SteerRad != w.SteerRad {
			t.Fatalf("control %d: %+v, want %+v shifted by 1001 us", i, c, w)
		}
	}
	for _, step := range []int64{121, 933, 1801} {
		tUs := step * simStepUs
		got, ok1 := s.Truth(tUs)
		want, ok2 := r.Session.Truth(tUs)
		if !ok1 || !ok2 || math.Hypot(got.XM-want.XM, got.YM-want.YM) > 0.02 {
			t.Errorf("pose at %d us: %+v, want %+v", tUs, got, want)
		}
	}
	ac := AttributionConfig{Follower: PurePursuit{LookaheadM: 10, WheelbaseM: simWheelbaseM}}
	a, err := GapCosts([]Session{r.Session}, ac)
	if err != nil {
		t.Fatal(err)
	}
	b, err := GapCosts([]Session{s}, ac)
	if err != nil {
		t.Fatal(err)
	}
	if len(a) != len(b) || len(a) == 0 {
		t.Fatalf("%d gaps read back, want %d", len(b), len(a))
	}
	sa, sb := 0.0, 0.0
	for i := range a {
		sa, sb = sa+a[i].CostRadS, sb+b[i].CostRadS
	}
	if math.Abs(sa-sb) > 0.02*sa {
		t.Errorf("total gap cost %g read back, %g simulated", sb, sa)
	}
}
