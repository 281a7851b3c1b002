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
*/
import "C"

// Current returns the timer slack of the calling thread in nanoseconds, or
// -1 if the system does not say.
func Current() int64 { return int64(C.sg_timerslack_get()) }

// cDefault and cEnvVar are the C side's copies of Default and EnvVar.
func cDefault() int64 { return int64(C.sg_timerslack_default()) }
func cEnvVar() string { return C.GoString(C.sg_timerslack_env()) }
