package filter_test

import (
	"fmt"
	"math"

	"stopgap/filter"
)

// A video frame captured at t = 1 s is missing and the display needs a
// picture at t = 1.5 s: Relative gives the vehicle motion over that gap and
// its uncertainty, which grows from zero at the gap start. Here the car
// drives at 10 m/s turning left at 0.1 rad/s; the closed form for the gap is
// dx = (v/ω)·sin(ωT) = 4.998 m, dy = (v/ω)·(1 − cos ωT) = 0.125 m,
// dyaw = ωT = 0.050 rad. With the default noise the 500 ms sigmas are
// dominated by the process noise over the gap: σ_dx ≈ σ_a·T²/2 = 0.25 m and
// σ_dyaw ≈ σ_ω̇·T²/2 = 0.0625 rad.
func ExampleFilter_Relative() {
	f, err := filter.New(filter.Config{Model: filter.ModelCTRV})
	if err != nil {
		fmt.Println(err)
		return
	}
	// One second of 100 Hz telemetry.
	for i := range 101 {
		s := filter.Sample{TimeUs: int64(i) * 10_000, SpeedMps: 10, YawRateRps: 0.1}
		if err := f.Add(s); err != nil {
			fmt.Println(err)
			return
		}
	}
	for _, t1 := range []int64{1_000_000, 1_100_000, 1_500_000} {
		m, err := f.Relative(1_000_000, t1)
		if err != nil {
			fmt.Println(err)
			return
		}
		fmt.Printf("gap %3d ms: dx %.3f m, dy %.3f m, dyaw %.3f rad; sigma dx %.3f m, dy %.3f m, dyaw %.4f rad\n",
			(t1-1_000_000)/1000, m.DxM, m.DyM, m.DyawRad,
			math.Sqrt(m.Cov[0][0]), math.Sqrt(m.Cov[1][1]), math.Sqrt(m.Cov[2][2]))
	}
	// Output:
	// gap   0 ms: dx 0.000 m, dy 0.000 m, dyaw 0.000 rad; sigma dx 0.000 m, dy 0.000 m, dyaw 0.0000 rad
	// gap 100 ms: dx 1.000 m, dy 0.005 m, dyaw 0.010 rad; sigma dx 0.011 m, dy 0.000 m, dyaw 0.0007 rad
	// gap 500 ms: dx 4.998 m, dy 0.125 m, dyaw 0.050 rad; sigma dx 0.251 m, dy 0.010 m, dyaw 0.0070 rad
}
