package opfit

import (
	"fmt"
	"math"
	"math/rand/v2"

	"stopgap/bench"
	"stopgap/bench/simdrive"
	"stopgap/filter"
	"stopgap/internal/lossmodel"
	"stopgap/predictor"
)

// SimOperator is a simulated driver for tests: a pure pursuit path follower
// that acts on what the console shows, late and with noise.
//
//   - LIVE: it sees the true pose of the frame's capture time.
//   - PREDICTED: it sees the pose the predicted frame depicts (the held
//     frame's true pose moved by the filter's estimated motion, so with the
//     estimate's real error) and, on top, misreads it sideways by
//     Misled × σ_lat × z, with σ_lat the estimate's own 1-sigma lateral
//     uncertainty at the lookahead distance (the spread the confidence is
//     made from) and z ~ N(0, 1) drawn once per gap: how much this operator
//     is misled by a predicted picture as it grows uncertain.
//   - STALE: it knows the picture is old and holds its last command.
//
// It re-decides on each new tick it perceives, DelayMs after the tick went
// on screen, adding N(0, NoiseRad²) to the follower's command.
type SimOperator struct {
	Name       string
	DelayMs    float64
	NoiseRad   float64
	Misled     float64
	LookaheadM float64
}

// Course is the simdrive road prepared for closed-loop drives: its centre
// line, camera, length and speed. Create it once with NewCourse; it is
// read-only and may be shared.
type Course struct {
	path      Path
	cam       predictor.Camera
	durationS float64
	speedMps  float64
}

// NewCourse prepares the road of the simdrive scenario road: its DurationS
// is the drive length (0 = 60 s) and SpeedMps the constant speed driven
// (0 = simdrive.DefaultSpeedMps).
func NewCourse(road simdrive.Config) (*Course, error) {
	if road.DurationS == 0 {
		road.DurationS = 60
	}
	if road.SpeedMps == 0 {
		road.SpeedMps = simdrive.DefaultSpeedMps
	}
	rx, ry, err := road.Road(0.25)
	if err != nil {
		return nil, err
	}
	cam, err := road.Camera()
	if err != nil {
		return nil, err
	}
	return &Course{path: Path{XM: rx, YM: ry}, cam: cam, durationS: road.DurationS, speedMps: road.SpeedMps}, nil
}

// SimConfig describes a closed-loop simulated drive on a Course.
type SimConfig struct {
	// LatencyMs is the capture-to-display delay of frames and telemetry.
	LatencyMs float64
	// Loss: Gilbert-Elliott loss of frames; telemetry taken while a frame
	// was the newest capture shares that frame's fate.
	LossRate, BurstMs float64
	// Policy: cutoff and maximum age of predicted frames.
	Policy predictor.Policy
	// Seed selects the loss pattern and the operator's noise.
	Seed uint64
}

// Sim timing: physics and telemetry at 120 Hz, frames at 30 fps (4 steps).
const (
	simStepUs      = 25_000 / 3 // 8333 us, about 1/120 s
	simStepsPerFr  = 4
	simWheelbaseM  = filter.DefaultWheelbaseM
	simMaxSteerRad = 0.5
)

// SimResult is a simulated drive: the session as the fit sees it and the
// simulated error.
type SimResult struct {
	Session Session
	// MeanDeviationRad is the mean |command - reference follower on the
	// true state| over the drive: the operator's simulated error.
	MeanDeviationRad float64
	// RMSLateralM is the RMS distance of the vehicle from the road's centre
	// line.
	RMSLateralM float64

	latencyUs int64 // capture to display
}

// Simulate drives op along the road in closed loop through the filter, the
// confidence model and the policy, in virtual time (receiver and vehicle
// clocks are one clock here).
func (co *Course) Simulate(op SimOperator, cfg SimConfig) (SimResult, error) {
	path, cam := co.path, co.cam
	flt, err := filter.New(filter.Config{Model: filter.ModelCTRV})
	if err != nil {
		return SimResult{}, err
	}
	var cm predictor.ConfidenceModel
	periodUs := int64(simStepUs * simStepsPerFr)
	nFrames := int(co.durationS * 1e6 / float64(periodUs))
	capture := make([]int64, nFrames)
	for i := range capture {
		capture[i] = int64(i) * periodUs
	}
	latUs := int64(cfg.LatencyMs * 1000)
	lost := make([]bool, nFrames)
	if cfg.LossRate > 0 {
		arr, err := lossmodel.Config{Model: lossmodel.GilbertElliott, LossRate: cfg.LossRate, BurstMs: cfg.BurstMs, Seed: cfg.Seed}.Simulate(nil, capture)
		if err != nil {
			return SimResult{}, err
		}
		for i, a := range arr.ArrivalUs {
			lost[i] = a == bench.NeverArrivesUs
		}
		lost[0] = false // the drive starts with a picture
	}
	// Separate streams: telemetry noise, the operator's steering noise, the
	// misreading of each gap.
	rng := rand.New(rand.NewPCG(cfg.Seed, 0x73696d6f))      // "simo"
	noiseRng := rand.New(rand.NewPCG(cfg.Seed, 0x6e6f6973)) // "nois"
	gapRng := rand.New(rand.NewPCG(cfg.Seed, 0x67617073))   // "gaps"
	pp := PurePursuit{LookaheadM: op.LookaheadM, WheelbaseM: simWheelbaseM}
	v := co.speedMps

	// History of true poses, one per physics step.
	nSteps := nFrames * simStepsPerFr
	truth := make([]Pose, 0, nSteps+1)
	truth = append(truth, Pose{})
	var (
		ticks           []Tick
		depicted        []Pose // per tick: the pose the picture shows
		controls        []Control
		held            int
		cmd             float64
		lastSeen        = -1
		z               float64
		sumDev, sumLat2 float64
		hintRef, hintOp int
		hintLat         int
		gapOpen         bool
		stepIndexOfTick = func(k int) int { return k * simStepsPerFr }
		delayUs         = int64(op.DelayMs * 1000)
		poseAt          = func(step int) Pose { return truth[min(step, len(truth)-1)] }
	)
	for step := 0; step < nSteps; step++ {
		t := int64(step) * simStepUs
		p := truth[step]
		// Telemetry of this step (taken at t), delivered unless its frame
		// is lost; the filter gets it at once (its delay only matters
		// relative to the display, which waits LatencyMs for everything).
		if fr := step / simStepsPerFr; step%2 == 0 && !lost[fr] {
			yawRate := v * math.Tan(cmd) / simWheelbaseM
			s := filter.Sample{TimeUs: t, SpeedMps: v + 0.05*rng.NormFloat64(), YawRateRps: yawRate + 0.002*rng.NormFloat64()}
			if err := flt.Add(s); err != nil {
				return SimResult{}, fmt.Errorf("telemetry at %d us: %w", t, err)
			}
		}
		// A frame captured at this step is displayed LatencyMs later; we
		// decide its tick now (everything it may use has arrived by then).
		if step%simStepsPerFr == 0 {
			k := step / simStepsPerFr
			tk := capture[k]
			tick := Tick{DisplayUs: tk + latUs, Cutoff: cfg.Policy.CutoffConfidence}
			var dp Pose
			if !lost[k] {
				tick.Shown, tick.Confidence = ShownLive, 1
				held, dp, gapOpen = k, p, false
			} else {
				if !gapOpen {
					z, gapOpen = gapRng.NormFloat64(), true
				}
				hp := poseAt(stepIndexOfTick(held))
				ageMs := float64(tk-capture[held]) / 1000
				m, err := flt.Relative(capture[held], tk)
				conf := 0.0
				if err == nil {
					conf, _, err = cm.Confidence(cam, m)
				}
				if err != nil {
					conf = 0
				}
				tick.Confidence = conf
				if cfg.Policy.Decide(false, conf, ageMs) == predictor.StatePredicted {
					tick.Shown = ShownPredicted
					c, s := math.Cos(hp.YawRad), math.Sin(hp.YawRad)
					dp = Pose{XM: hp.XM + c*m.DxM - s*m.DyM, YM: hp.YM + s*m.DxM + c*m.DyM, YawRad: hp.YawRad + m.DyawRad}
					la := op.LookaheadM
					sigLat := math.Sqrt(math.Max(m.Cov[1][1]+la*la*m.Cov[2][2], 0))
					off := op.Misled * sigLat * z
					dp.XM -= math.Sin(dp.YawRad) * off
					dp.YM += math.Cos(dp.YawRad) * off
				} else {
					tick.Shown, dp = ShownStale, hp
				}
			}
			ticks = append(ticks, tick)
			depicted = append(depicted, dp)
		}
		// The operator acts on the newest tick on screen DelayMs ago.
		seen := -1
		for j := max(lastSeen, 0); j < len(ticks) && ticks[j].DisplayUs <= t-delayUs; j++ {
			seen = j
		}
		if seen > lastSeen {
			lastSeen = seen
			// Drawn on every tick whatever is shown, so that drives that
			// differ only in the policy share their random numbers.
			noise := op.NoiseRad * noiseRng.NormFloat64()
			if ticks[seen].Shown != ShownStale {
				d, err := pp.Steer(path, depicted[seen], &hintOp)
				if err != nil {
					return SimResult{}, err
				}
				cmd = math.Max(-simMaxSteerRad, math.Min(simMaxSteerRad, d+noise))
			}
		}
		if step%2 == 0 {
			controls = append(controls, Control{TUs: t, SteerRad: cmd})
			ref, err := pp.Steer(path, p, &hintRef)
			if err != nil {
				return SimResult{}, err
			}
			sumDev += math.Abs(cmd - ref)
			sumLat2 += sq(lateral(path, p, &hintLat))
		}
		// Kinematic bicycle, rear-axle reference, exact arc over the step.
		h := float64(simStepUs) / 1e6
		w := v * math.Tan(cmd) / simWheelbaseM
		next := Pose{YawRad: p.YawRad + w*h}
		if math.Abs(w) < 1e-9 {
			next.XM, next.YM = p.XM+v*h*math.Cos(p.YawRad), p.YM+v*h*math.Sin(p.YawRad)
		} else {
			r := v / w
			next.XM = p.XM + r*(math.Sin(next.YawRad)-math.Sin(p.YawRad))
			next.YM = p.YM - r*(math.Cos(next.YawRad)-math.Cos(p.YawRad))
		}
		truth = append(truth, next)
	}
	n := float64(len(controls))
	res := SimResult{MeanDeviationRad: sumDev / n, RMSLateralM: math.Sqrt(sumLat2 / n), latencyUs: latUs}
	res.Session = Session{Ticks: ticks, Controls: controls, Path: path, Truth: func(tUs int64) (Pose, bool) {
		i := int(tUs / simStepUs)
		if i < 0 || i >= len(truth) || tUs%simStepUs != 0 {
			return Pose{}, false
		}
		return truth[i], true
	}}
	return res, nil
}

func sq(x float64) float64 { return x * x }

// lateral returns the distance from p to the nearest path point (path
// points are 0.25 m apart: within 0.125 m of the true distance), searching
// 20 m of path from *hint on.
func lateral(path Path, p Pose, hint *int) float64 {
	best, bestD := *hint, math.Inf(1)
	for j := *hint; j < len(path.XM) && j < *hint+80; j++ {
		if d := math.Hypot(path.XM[j]-p.XM, path.YM[j]-p.YM); d < bestD {
			best, bestD = j, d
		}
	}
	*hint = best
	return bestD
}
