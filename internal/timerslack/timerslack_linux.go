//go:build linux && cgo

package timerslack

/*
#include <stdlib.h>
#include <errno.h>
#include <sys/prctl.h>

// Keep in step with Default and EnvVar in doc.go (TestDefaultMatchesC).
#define SG_TIMERSLACK_DEFAULT_NS 500000UL
#define SG_TIMERSLACK_ENV "STOPGAP_TIMER_SLACK_NS"

static unsigned long sg_timerslack_default(void) { return SG_TIMERSLACK_DEFAULT_NS; }
static const char *sg_timerslack_env(void) { return SG_TIMERSLACK_ENV; }

// sg_timerslack_init runs before main, and so before the Go runtime starts
// any thread: every thread of the process inherits the slack it sets.
__attribute__((constructor)) static void sg_timerslack_init(void) {
	unsigned long ns = SG_TIMERSLACK_DEFAULT_NS;
	const char *v = getenv(SG_TIMERSLACK_ENV);
	if (v != NULL && *v != '\0') {
		char *end = NULL;
		errno = 0;
		unsigned long long n = strtoull(v, &end, 10);
		if (errno == 0 && end != NULL && *end == '\0' && v[0] >= '0' && v[0] <= '9' && n <= 1000000000ULL) {
			if (n == 0) {
				return;
			}
			ns = (unsigned long)n;
		}
	}
	prctl(PR_SET_TIMERSLACK, ns, 0, 0, 0);
}

static long sg_timerslack_get(void) { return (long)prctl(PR_GET_TIMERSLACK, 0, 0, 0, 0); }
static int sg_timerslack_set(unsigned long ns) { return prctl(PR_SET_TIMERSLACK, ns, 0, 0, 0); }
*/
import "C"

import (
	"errors"
	"log/slog"
	"os"
)

// init says once, on the default logger, when EnvVar holds a value the C
// constructor ignored: the constructor runs before any logger exists.
func init() {
	if v, set := os.LookupEnv(EnvVar); set && v != "" {
		if _, ok := parseEnv(v); !ok {
			slog.Warn("timer slack setting ignored: want a whole number of nanoseconds from 0 to 1000000000; the default applies",
				"env", EnvVar, "value", v, "default_ns", Default)
		}
	}
}

// Current returns the timer slack of the calling thread in nanoseconds, or
// -1 if the system does not say.
func Current() int64 { return int64(C.sg_timerslack_get()) }

// setCurrent sets the calling thread's timer slack (tests: a known value
// for a child process to inherit). Lock the goroutine to its thread first.
func setCurrent(ns int64) error {
	if C.sg_timerslack_set(C.ulong(ns)) != 0 {
		return errors.New("timerslack: prctl(PR_SET_TIMERSLACK) failed")
	}
	return nil
}

// cDefault and cEnvVar are the C side's copies of Default and EnvVar.
func cDefault() int64 { return int64(C.sg_timerslack_default()) }
func cEnvVar() string { return C.GoString(C.sg_timerslack_env()) }
