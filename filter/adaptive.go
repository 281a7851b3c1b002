package filter

import "math"

// turnTrend returns the yaw acceleration â (rad/s², signed) and the
// magnitude of the yaw jerk |ĵ| (rad/s³) shown by the measured yaw rates of
// the kept samples in the window of Config.TurnAdaptWindowUs ending at
// history entry last. â is the least-squares slope of yaw rate against
// time over the window. For ĵ the window is cut into three equal parts with
// mean yaw rates m1, m2, m3 at mean sample times t1, t2, t3 (oldest first):
//
//	ĵ = ((m3 − m2)/(t3 − t2) − (m2 − m1)/(t2 − t1)) / ((t3 − t1)/2)
//
// Averaging keeps gyro noise small. ok is false (and both 0) when the kept
// history does not reach back over the whole window or any part has fewer
// than two samples: the trend is then unknown. It does not allocate.
//
// Only telemetry samples count: video samples (SourceVideo) come at the
// frame rate with yaw-rate errors several times a gyro's, too few and too
// noisy for a derivative over the window (on the default simulated drive
// their trend made the gap's heading worse, not better). A track fed by
// video alone therefore has no trend: constant turn rate over gaps with
// the base gap noise.
func (f *Filter) turnTrend(last int) (accel, jerk float64, ok bool) {
	if last < 0 || last >= f.hist.len() {
		return 0, 0, false
	}
	if first := f.hist.at(0).s.TimeUs; f.hist.at(last).s.TimeUs-first < f.cfg.TurnAdaptWindowUs*9/10 {
		return 0, 0, false
	}
	end := f.hist.at(last).s.TimeUs
	w := f.cfg.TurnAdaptWindowUs
	var n [3]int
	var r, t [3]float64
	var m, sx, sy, sxx, sxy float64
	for j := last; j >= 0; j-- {
		s := &f.hist.at(j).s
		age := end - s.TimeUs
		if age > w {
			break
		}
		if s.Source == SourceVideo {
			continue
		}
		k := 2 - int(min(2, 3*age/max(w, 1)))
		x := float64(-age) * 1e-6
		n[k]++
		r[k] += s.YawRateRps
		t[k] += x
		m++
		sx += x
		sy += s.YawRateRps
		sxx += x * x
		sxy += x * s.YawRateRps
	}
	for k := range n {
		if n[k] < 2 {
			return 0, 0, false
		}
		r[k] /= float64(n[k])
		t[k] /= float64(n[k])
	}
	if !(t[2] > t[1] && t[1] > t[0]) {
		return 0, 0, false
	}
	a2 := (r[2] - r[1]) / (t[2] - t[1])
	a1 := (r[1] - r[0]) / (t[1] - t[0])
	j := (a2 - a1) / ((t[2] - t[0]) / 2)
	a := (m*sxy - sx*sy) / (m*sxx - sx*sx)
	if math.IsNaN(a) || math.IsInf(a, 0) || math.IsNaN(j) || math.IsInf(j, 0) {
		return 0, 0, false
	}
	return a, math.Abs(j), true
}

// turnAccelCorrection returns the change of the predicted mean when the
// yaw rate of state x changes at the constant rate accelRps2 over dtS
// seconds instead of staying constant: the difference of two integrations
// of the motion model in sub-steps of at most 10 ms, one with the yaw rate
// advanced by accelRps2 at each sub-step's middle, one without (so the
// integration error of the sub-steps cancels). CTRV only.
func (k *kinematics) turnAccelCorrection(x *[StateDim]float64, dtS, accel, accelRps2 float64) (d [StateDim]float64) {
	n := int(math.Ceil(dtS / 0.01))
	if n < 1 || accelRps2 == 0 || k.model != ModelCTRV {
		return d
	}
	n = min(n, 1000)
	h := dtS / float64(n)
	var fj [StateDim][StateDim]float64
	var g [StateDim][2]float64
	a, b := *x, *x
	w0 := x[IdxTurn]
	for i := range n {
		a[IdxTurn] = w0 + accelRps2*(float64(i)+0.5)*h
		var an, bn [StateDim]float64
		k.transition(&a, h, accel, &an, &fj, &g)
		k.transition(&b, h, accel, &bn, &fj, &g)
		a, b = an, bn
	}
	a[IdxTurn] = w0 + accelRps2*dtS
	for i := range d {
		d[i] = a[i] - b[i]
	}
	return d
}

// maxVideoSpeedTrendMps2 bounds the video's speed trend: beyond it the
// estimates are wrong rather than the vehicle that hard on its brakes.
const maxVideoSpeedTrendMps2 = 8.0

// videoSpeedTrend returns the least-squares slope (m/s²) of the speeds of
// the video samples (SourceVideo) kept in the Config.VideoSpeedTrendWindowUs
// ending at history entry last, clamped to ±maxVideoSpeedTrendMps2; ok is
// false with fewer than four such samples. It does not allocate.
func (f *Filter) videoSpeedTrend(last int) (accel float64, ok bool) {
	if last < 0 || last >= f.hist.len() {
		return 0, false
	}
	end := f.hist.at(last).s.TimeUs
	var n, sx, sy, sxx, sxy float64
	for j := last; j >= 0; j-- {
		s := &f.hist.at(j).s
		age := end - s.TimeUs
		if age > f.cfg.VideoSpeedTrendWindowUs {
			break
		}
		if s.Source != SourceVideo {
			continue
		}
		x := float64(-age) * 1e-6
		n++
		sx += x
		sy += s.SpeedMps
		sxx += x * x
		sxy += x * s.SpeedMps
	}
	if n < 4 {
		return 0, false
	}
	a := (n*sxy - sx*sy) / (n*sxx - sx*sx)
	if math.IsNaN(a) || math.IsInf(a, 0) {
		return 0, false
	}
	return math.Max(-maxVideoSpeedTrendMps2, math.Min(maxVideoSpeedTrendMps2, a)), true
}
