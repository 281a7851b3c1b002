package filter

import "math"

// turnTrend returns the magnitudes of the yaw acceleration |â| (rad/s²) and
// yaw jerk |ĵ| (rad/s³) shown by the measured yaw rates of the kept samples
// in the window of Config.TurnAdaptWindowUs ending at history entry last.
// The window is cut into three equal parts with mean yaw rates m1, m2, m3
// at mean sample times t1, t2, t3 (oldest first):
//
//	â = (m3 − m2)/(t3 − t2),  ĵ = (â − (m2 − m1)/(t2 − t1)) / ((t3 − t1)/2)
//
// Averaging keeps gyro noise small (0.01 rad/s white noise at 100 Hz over
// a 0.5 s window gives about 0.02 rad/s² of noise in â). Both are 0 with
// fewer than two samples in any part. It does not allocate.
func (f *Filter) turnTrend(last int) (accel, jerk float64) {
	if last < 0 || last >= f.hist.len() {
		return 0, 0
	}
	end := f.hist.at(last).s.TimeUs
	w := f.cfg.TurnAdaptWindowUs
	var n [3]int
	var r, t [3]float64
	for j := last; j >= 0; j-- {
		s := &f.hist.at(j).s
		age := end - s.TimeUs
		if age > w {
			break
		}
		k := 2 - int(min(2, 3*age/max(w, 1)))
		n[k]++
		r[k] += s.YawRateRps
		t[k] += float64(-age) * 1e-6
	}
	for k := range n {
		if n[k] < 2 {
			return 0, 0
		}
		r[k] /= float64(n[k])
		t[k] /= float64(n[k])
	}
	if !(t[2] > t[1] && t[1] > t[0]) {
		return 0, 0
	}
	a2 := (r[2] - r[1]) / (t[2] - t[1])
	a1 := (r[1] - r[0]) / (t[1] - t[0])
	j := (a2 - a1) / ((t[2] - t[0]) / 2)
	if math.IsNaN(a2) || math.IsInf(a2, 0) || math.IsNaN(j) || math.IsInf(j, 0) {
		return 0, 0
	}
	return math.Abs(a2), math.Abs(j)
}
