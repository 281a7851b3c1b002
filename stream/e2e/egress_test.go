package e2e

import (
	"fmt"
	"os"
	"testing"

	"stopgap/stream/relay"
)

// egressEnv selects how the relay sends LIVE frames to the console in the
// capacity, fault and soak runs of this package, so the same runs measure
// every egress mode: "passthru" (the relay's default: LIVE frames are
// forwarded as the vehicle sent them) or "transcode" (decode, fill,
// re-encode every tick; relay.Config.AlwaysTranscode).
const egressEnv = "STOPGAP_E2E_EGRESS"

// egressMode returns the mode named by STOPGAP_E2E_EGRESS ("passthru" when
// unset: the relay's default).
func egressMode() string {
	if m := os.Getenv(egressEnv); m != "" {
		return m
	}
	return "passthru"
}

// applyEgress sets the relay's egress mode in cfg. It is the one place that
// maps the runs' setting onto relay.Config: a mode the relay does not have
// is an error, and the callers skip rather than measure the wrong thing.
func applyEgress(cfg *relay.Config, mode string) error {
	switch mode {
	case "passthru":
		cfg.AlwaysTranscode = false
		return nil
	case "transcode":
		cfg.AlwaysTranscode = true
		return nil
	default:
		return fmt.Errorf("%s=%q: this relay has no such egress mode (known: passthru, transcode)", egressEnv, mode)
	}
}

// requireEgress skips t when the selected egress mode is not available.
func requireEgress(t testing.TB) string {
	t.Helper()
	m := egressMode()
	if err := applyEgress(&relay.Config{}, m); err != nil {
		t.Skip(err)
	}
	return m
}
