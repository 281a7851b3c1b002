package filter

import "math"

// yawAccelBefore returns |â|, the magnitude of the yaw acceleration shown by
// the measured yaw rates of the kept samples in the window of
// Config.TurnAdaptWindowUs ending at history entry last: the difference of
// the mean yaw rate of the newer and older halves of the window, divided by
// the time between their mean sample times. Averaging keeps gyro noise
// small (0.01 rad/s white noise at 100 Hz over 0.5 s halves gives about
// 0.003 rad/s² of noise in â). It returns 0 with fewer than two samples in
// either half. It does not allocate.
func (f *Filter) yawAccelBefore(last int) float64 {
	if last < 0 || last >= f.hist.len() {
		return 0
	}
	end := f.hist.at(last).s.TimeUs
	start := end - f.cfg.TurnAdaptWindowUs
	mid := end - f.cfg.TurnAdaptWindowUs/2
	var nOld, nNew int
	var rOld, rNew, tOld, tNew float64
	for j := last; j >= 0; j-- {
		s := &f.hist.at(j).s
		if s.TimeUs < start {
			break
		}
		t := float64(s.TimeUs-end) * 1e-6
		if s.TimeUs >= mid {
			nNew++
			rNew += s.YawRateRps
			tNew += t
		} else {
			nOld++
			rOld += s.YawRateRps
			tOld += t
		}
	}
	if nOld < 2 || nNew < 2 {
		return 0
	}
	dt := tNew/float64(nNew) - tOld/float64(nOld)
	if !(dt > 0) {
		return 0
	}
	a := math.Abs(rNew/float64(nNew)-rOld/float64(nOld)) / dt
	if math.IsNaN(a) || math.IsInf(a, 0) {
		return 0
	}
	return a
}
