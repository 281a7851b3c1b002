package simdrive

import "math"

// Road returns the centre line the drive follows (the scripted path of the
// vehicle origin, which the street is built around) as world points (ISO
// 8855, metres) about stepM apart, from the start to the end of the drive
// plus the road ahead of it. Closed-loop simulations steer along it.
func (c Config) Road(stepM float64) (xM, yM []float64, err error) {
	c, err = c.withDefaults()
	if err != nil {
		return nil, nil, err
	}
	if !(stepM > 0) {
		stepM = 0.5
	}
	tr := newTrajectory(c.SpeedMps, c.DurationS)
	last := tr.grid[0]
	xM, yM = []float64{last.XM}, []float64{last.YM}
	for _, p := range tr.grid[1:] {
		if math.Hypot(p.XM-last.XM, p.YM-last.YM) >= stepM {
			xM, yM = append(xM, p.XM), append(yM, p.YM)
			last = p
		}
	}
	return xM, yM, nil
}
