package relay

import (
	"bufio"
	"strings"
	"testing"

	"stopgap/internal/display"
	"stopgap/stream/passthru"
)

// TestMetricNames checks the exposition against Prometheus naming practice
// (prometheus.io, "Metric and label naming"; from the published guide):
// one application prefix on every name, counters end in _total, and the
// series an alert needs are there: decode errors, failed keyframe
// requests, the current state and the picture age.
func TestMetricNames(t *testing.T) {
	m := newMetrics()
	m.decodeErrors.Add(2)
	m.keyframeRequestsFailed.Add(3)
	m.tick(display.StateNoPicture, 0)
	m.tick(display.StatePredicted, 133.4)
	m.tick(display.StatePredicted, 133.4)
	var b strings.Builder
	m.writeText(&b, 1, passthru.Stats{})
	text := b.String()

	types := map[string]string{}
	sc := bufio.NewScanner(strings.NewReader(text))
	for sc.Scan() {
		line := sc.Text()
		if f := strings.Fields(line); len(f) == 4 && f[0] == "#" && f[1] == "TYPE" {
			types[f[2]] = f[3]
			continue
		}
		if strings.HasPrefix(line, "#") || line == "" {
			continue
		}
		if !strings.HasPrefix(line, MetricPrefix) {
			t.Errorf("series without the %q prefix: %s", MetricPrefix, line)
		}
	}
	for name, typ := range types {
		if !strings.HasPrefix(name, MetricPrefix) {
			t.Errorf("metric %s lacks the prefix %q", name, MetricPrefix)
		}
		if (typ == "counter") != strings.HasSuffix(name, "_total") {
			t.Errorf("metric %s of type %s: counters, and only counters, end in _total", name, typ)
		}
	}
	for _, want := range []string{
		"stopgap_decode_errors_total 2\n",
		"stopgap_keyframe_requests_failed_total 3\n",
		`stopgap_frame_state{state="predicted"} 1` + "\n",
		`stopgap_frame_state{state="live"} 0` + "\n",
		"stopgap_picture_age_seconds 0.1334\n",
		`stopgap_ticks_total{state="stale"} 0` + "\n",
		`stopgap_ticks_total{state="predicted"} 2` + "\n",
		`stopgap_ticks_total{state="no_picture"} 1` + "\n",
		`stopgap_ticks_total{state="not_shown"} 0` + "\n",
		`stopgap_frame_state{state="no_picture"} 0` + "\n",
		"stopgap_process_goroutines_created_total ",
		"stopgap_process_threads ",
	} {
		if !strings.Contains(text, want) {
			t.Errorf("exposition lacks %q", want)
		}
	}
}

// TestMetricNotShownKeepsAge: a tick decided but not put on screen is the
// current state, and the picture age stays the one on screen.
func TestMetricNotShownKeepsAge(t *testing.T) {
	m := newMetrics()
	m.tick(display.StateStale, 700)
	m.tick(display.StateNotShown, 0)
	var b strings.Builder
	m.writeText(&b, 1, passthru.Stats{})
	for _, want := range []string{
		`stopgap_frame_state{state="not_shown"} 1` + "\n",
		`stopgap_frame_state{state="stale"} 0` + "\n",
		`stopgap_ticks_total{state="not_shown"} 1` + "\n",
		"stopgap_picture_age_seconds 0.7\n",
	} {
		if !strings.Contains(b.String(), want) {
			t.Errorf("exposition lacks %q", want)
		}
	}
}
