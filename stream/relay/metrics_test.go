package relay

import (
	"bufio"
	"os"
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
	m.keyframeRequests[keyPassThrough].Add(4)
	m.keyframeRequests[keyLoss].Add(1)
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
		`stopgap_keyframe_requests_total{reason="pass-through"} 4` + "\n",
		`stopgap_keyframe_requests_total{reason="loss"} 1` + "\n",
		`stopgap_keyframe_requests_total{reason="viewer"} 0` + "\n",
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

// TestKeyframeReasonNames: every reason has its own label value, and
// keyframeRequestsSent counts every reason.
func TestKeyframeReasonNames(t *testing.T) {
	m := newMetrics()
	seen := map[string]keyframeReason{}
	for r := keyReasonInvalid + 1; r < keyReasonCount; r++ {
		name := r.String()
		if name == "" || name == "invalid" || strings.ToLower(name) != name || strings.ContainsAny(name, " ,_") {
			t.Errorf("reason %d has label value %q, want lower-case words joined by hyphens", r, name)
		}
		if o, dup := seen[name]; dup {
			t.Errorf("reasons %d and %d share the label value %q", o, r, name)
		}
		seen[name] = r
		m.keyframeRequests[r].Add(uint64(r))
	}
	if got, want := m.keyframeRequestsSent(), uint64((keyReasonCount-1)*keyReasonCount/2); got != want {
		t.Errorf("keyframeRequestsSent %d, want %d", got, want)
	}
	if got := keyReasonCount.String(); got != "invalid" {
		t.Errorf("out-of-range reason reads %q, want invalid", got)
	}
	// The README lists them, in this order.
	var names []string
	for r := keyReasonInvalid + 1; r < keyReasonCount; r++ {
		names = append(names, r.String())
	}
	readme, err := os.ReadFile("../../README.md")
	if err != nil {
		t.Fatal(err)
	}
	if want := `stopgap_keyframe_requests_total{reason="` + strings.Join(names, "|") + `"}`; !strings.Contains(string(readme), want) {
		t.Errorf("README.md lacks %s", want)
	}
}
