//go:build !linux

package predictor

import "time"

var benchEpoch = time.Now()

// threadCPU falls back to wall time where the thread CPU clock is not
// wired up (see cputime_linux_test.go).
func threadCPU() time.Duration { return time.Since(benchEpoch) }
