package bench

import (
	"context"
	"encoding/csv"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"testing"
)

// TestReplayPredictedOnlyAndCalibration: summary.json keeps the old keys and
// adds the new ones, "shown" repeats "predicted", and the PREDICTED-only
// figures and harm counts recomputed independently from ticks.csv match.
func TestReplayPredictedOnlyAndCalibration(t *testing.T) {
	cfg := smallConfig()
	cfg.PanYawRateRps = 0.5
	drive := smallDrive(t, cfg)
	out := filepath.Join(t.TempDir(), "report")
	rc := baseReplay(drive, out)
	rc.Loss.LossRate, rc.Loss.BurstMs = 0.3, 300
	sum, err := Replay(context.Background(), rc)
	if err != nil {
		t.Fatal(err)
	}
	b, err := os.ReadFile(filepath.Join(out, SummaryFile))
	if err != nil {
		t.Fatal(err)
	}
	var disk map[string]any
	if err := json.Unmarshal(b, &disk); err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{"ticks_total", "ticks_missing", "predicted_ticks", "stale_ticks", "synth_ms_p50", "synth_ms_p99",
		"methods", "predicted_only", "telemetry", "calibration", "calibration_truth"} {
		if _, ok := disk[k]; !ok {
			t.Errorf("summary.json lacks %q", k)
		}
	}
	m := disk["methods"].(map[string]any)
	for _, k := range []string{"hold", "rotation", "predicted", "shown"} {
		if _, ok := m[k]; !ok {
			t.Errorf("summary.json methods lacks %q", k)
		}
	}
	if sum.Methods.Shown.Frames != sum.Methods.Predicted.Frames || sum.Methods.Shown.SSIMMean != sum.Methods.Predicted.SSIMMean {
		t.Errorf("shown %+v differs from predicted %+v", sum.Methods.Shown, sum.Methods.Predicted)
	}
	// Independent recomputation from ticks.csv.
	f, err := os.Open(filepath.Join(out, TicksFile))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	col := map[string]int{}
	for i, h := range recs[0] {
		col[h] = i
	}
	num := func(r []string, name string) float64 {
		v, err := strconv.ParseFloat(r[col[name]], 64)
		if err != nil {
			return math.NaN()
		}
		return v
	}
	var n, harm int
	var psnr float64
	for _, r := range recs[1:] {
		if r[col["state"]] != TickPredicted || math.IsNaN(num(r, "hold_psnr_db")) {
			continue
		}
		n++
		p, h := math.Min(num(r, "predicted_psnr_db"), PSNRCapDB), math.Min(num(r, "hold_psnr_db"), PSNRCapDB)
		psnr += p
		if p < h-1 {
			harm++
		}
		if num(r, "warp_psnr_db") != num(r, "predicted_psnr_db") {
			t.Errorf("tick %s: the warp of a PREDICTED tick must be what was shown", r[0])
		}
	}
	po := sum.PredictedOnly
	if os.Getenv("STOPGAP_DEBUG") != "" {
		for _, r := range recs[1:] {
			if r[col["state"]] != TickLive {
				t.Log(r[col["tick"]], r[col["age_ms"]], r[col["confidence"]], r[col["sigma_px"]], r[col["misalign_mrad"]], r[col["truth_misalign_mrad"]])
			}
		}
	}
	t.Logf("PREDICTED %d of %d missing; harm %d; calibration images ECE %.3f over %d, truth ECE %.3f over %d",
		po.Frames, sum.TicksMissing, po.HarmPSNR, float64(sum.Calibration.ECE), sum.Calibration.Frames, float64(sum.CalibrationTruth.ECE), sum.CalibrationTruth.Frames)
	if n == 0 || po.Frames != n || po.HarmPSNR != harm || math.Abs(float64(po.PSNRdBMean)-psnr/float64(n)) > 1e-9 {
		t.Errorf("predicted_only %+v; from ticks.csv %d frames, %d harmful, PSNR %.4f", po, n, harm, psnr/float64(n))
	}
	if sum.CalibrationTruth.Frames == 0 || sum.Calibration.Frames == 0 || sum.Calibration.ToleranceMrad != 10 {
		t.Errorf("calibration not computed: %+v / %+v", sum.Calibration, sum.CalibrationTruth)
	}
	for _, f := range []string{ReliabilityPlotFile, ConfidencePlotFile} {
		if _, err := os.Stat(filepath.Join(out, f)); err != nil {
			t.Errorf("report lacks %s: %v", f, err)
		}
	}
}
