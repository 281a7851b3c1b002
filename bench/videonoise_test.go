package bench

import (
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"gocv.io/x/gocv"

	"stopgap/bench/simdrive"
	"stopgap/filter"
	"stopgap/internal/lossmodel"
	"stopgap/predictor"
	"stopgap/stream/recording"
)

// videoLink is one simulated link of a drive with the video's ego-motion
// estimates of the frames that arrived, as the replay computes them
// (frames observed in arrival order, each estimate reaching the filter at
// its frame's arrival).
type videoLink struct {
	rec       *recording.Recording
	sched     Schedule
	captureUs []int64
	arrivalUs []int64 // per estimate
	samples   []filter.Sample
}

// newVideoLink simulates loss on the drive in dir and runs the ego-motion
// over the frames that arrive.
func newVideoLink(tb testing.TB, dir string, loss lossmodel.Config) videoLink {
	tb.Helper()
	rec, err := recording.Open(dir)
	if err != nil {
		tb.Fatal(err)
	}
	l := videoLink{rec: rec, captureUs: make([]int64, len(rec.Frames))}
	for i, f := range rec.Frames {
		l.captureUs[i] = f.CaptureUs
	}
	arr, err := loss.Simulate(nil, l.captureUs)
	if err != nil {
		tb.Fatal(err)
	}
	if l.sched, err = NewSchedule(l.captureUs, arr.ArrivalUs, int64(DefaultAllowanceMs*1000)); err != nil {
		tb.Fatal(err)
	}
	em, err := predictor.NewEgoMotion(predictor.EgoMotionConfig{Camera: rec.Camera, Seed: 1})
	if err != nil {
		tb.Fatal(err)
	}
	defer em.Close()
	for _, j := range arrivalOrder(arr.ArrivalUs) {
		m := gocv.IMRead(filepath.Join(dir, rec.Frames[j].File), gocv.IMReadColor)
		est, ok, err := em.Observe(m, l.captureUs[j])
		m.Close()
		if err != nil || !ok {
			continue
		}
		l.arrivalUs = append(l.arrivalUs, arr.ArrivalUs[j])
		l.samples = append(l.samples, est.Sample())
	}
	return l
}

// videoGapScores are the video-only filter's predictions over the missing
// ticks of some links, against truth.csv.
type videoGapScores struct {
	conf, misMrad []float64
}

// score replays the link's estimates into a filter made with fcfg and
// scores every missing tick up to maxAgeMs: the confidence of the motion
// since the held frame and its misalignment against the truth.
func (l videoLink) score(tb testing.TB, fcfg filter.Config, cm predictor.ConfidenceModel, maxAgeMs float64, out *videoGapScores) {
	tb.Helper()
	flt, err := filter.New(fcfg)
	if err != nil {
		tb.Fatal(err)
	}
	cam := l.rec.Camera
	next := 0
	for k := range l.captureUs {
		dl := l.sched.DeadlineUs(k)
		for ; next < len(l.samples) && l.arrivalUs[next] <= dl; next++ {
			_ = flt.Add(l.samples[next])
		}
		if l.sched.Live(k) {
			continue
		}
		j := l.sched.Held(k)
		if j < 0 || float64(l.captureUs[k]-l.captureUs[j])/1000 > maxAgeMs {
			continue
		}
		m, err := flt.Relative(l.captureUs[j], l.captureUs[k])
		if err != nil {
			continue
		}
		c, _, err := cm.Confidence(cam, m)
		if err != nil {
			continue
		}
		t0, t1 := l.rec.Truth[j], l.rec.Truth[k]
		co, si := math.Cos(t0.YawRad), math.Sin(t0.YawRad)
		dx, dy := t1.XM-t0.XM, t1.YM-t0.YM
		tr := [3]float64{co*dx + si*dy, -si*dx + co*dy, math.Remainder(t1.YawRad-t0.YawRad, 2*math.Pi)}
		px, err := TruthMisalignmentPx(cam, cm, [3]float64{m.DxM, m.DyM, m.DyawRad}, tr)
		if err != nil {
			continue
		}
		out.conf = append(out.conf, c)
		out.misMrad = append(out.misMrad, PxToMrad(px, cam.Fx))
	}
}

// BenchmarkVideoNoiseFit scores candidate values of the video-only gap
// noise (filter.Config.VideoGapYawAccelNoiseRps2) by the calibration of
// their confidence against the exact misalignment (ECE, and the Brier
// score, a proper scoring rule, which chose the default) over the missing
// ticks of three simulated links per drive (10 % loss in 200 ms bursts,
// seeds 1 to 3), without warping a frame, and prints one line per
// candidate: the calibration, the ticks whose confidence reaches the
// default cutoff and their mean misalignment. STOPGAP_VIDEO_FIT_DRIVES
// lists drive directories (comma-separated; default: the default drive,
// generated); the default was fitted on simdrive seeds 3 and 4. It
// requires nothing.
//
//	go test ./bench -run '^$' -bench VideoNoiseFit -benchtime 1x
func BenchmarkVideoNoiseFit(b *testing.B) {
	var drives []string
	if s := os.Getenv("STOPGAP_VIDEO_FIT_DRIVES"); s != "" {
		drives = strings.Split(s, ",")
	} else {
		drives = []string{smallDrive(b, simdrive.Config{})}
	}
	var links []videoLink
	for _, d := range drives {
		for _, seed := range []uint64{1, 2, 3} {
			links = append(links, newVideoLink(b, d, lossmodel.Config{Model: lossmodel.GilbertElliott, LossRate: 0.1, BurstMs: 200, Seed: seed}))
		}
	}
	type cand struct {
		name string
		cfg  filter.Config
	}
	var cands []cand
	for _, gap := range []float64{0.03, 0.05, 0.1, 0.15, 0.2, 0.25, 0.3} {
		cands = append(cands, cand{fmt.Sprintf("video gap noise %.2f rad/s²", gap),
			filter.Config{Model: filter.ModelCTRV, VideoGapYawAccelNoiseRps2: gap}})
	}
	b.ResetTimer()
	for range b.N {
		for _, c := range cands {
			var sc videoGapScores
			for _, l := range links {
				l.score(b, c.cfg, predictor.ConfidenceModel{}, predictor.DefaultMaxAgeMs, &sc)
			}
			tol := predictor.ConfidenceModel{}.Tolerance()
			good := make([]bool, len(sc.conf))
			var mis, misPred float64
			nPred := 0
			for i := range good {
				good[i] = sc.misMrad[i] <= tol
				mis += sc.misMrad[i]
				if sc.conf[i] >= predictor.DefaultCutoffConfidence {
					nPred++
					misPred += sc.misMrad[i]
				}
			}
			cal := Calibrate(sc.conf, good, 0)
			fmt.Printf("%-36s ticks %4d ECE %.3f Brier %.4f conf %.3f good %.3f | predicted %4d mis %.2f mrad (all %.2f)",
				c.name, cal.Frames, float64(cal.ECE), float64(cal.Brier), float64(cal.ConfMean), float64(cal.GoodShare),
				nPred, misPred/float64(max(1, nPred)), mis/float64(max(1, len(good))))
			fmt.Println()
		}
	}
}
