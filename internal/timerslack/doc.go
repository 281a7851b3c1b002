// Package timerslack sets the Linux timer slack of the process before the Go
// runtime starts its threads. Import it for its side effect (the relay
// does, package stopgap/stream/relay):
//
//	import _ "stopgap/internal/timerslack"
//
// # Why
//
// A thread's timer slack (prctl PR_SET_TIMERSLACK, Linux 2.6.28) is how
// much later than asked the kernel may end its timed sleeps, so that
// wake-ups can be grouped; a new thread inherits its creator's, and the
// kernel's default is 50 us. The Go runtime's monitor thread (sysmon)
// sleeps 20 us between checks while any goroutine runs or sits in a system
// call or a cgo call, for at least 50 checks after the process last came out
// of being idle, and every check is a sleep and a wake-up of a thread of its
// own. A relay that passes frames through is idle most of the time and busy
// in short bursts: each packet wakes it, and the decode of every frame
// (about 3 ms of cgo at 1280x720) keeps it busy. Measured with perf on such
// a relay, the monitor thread took about a fifth of the process's CPU, most
// of it in the kernel switching to and from its sleeps.
//
// With a slack of Default each of those sleeps lasts about half a
// millisecond instead of about 70 us, so the monitor checks some seven
// times less often while the process is busy. What the checks are for stays:
// a processor held by a goroutine in a long system call or cgo call is
// handed to other goroutines (now within about half a millisecond instead
// of about 70 us, which matters only when every processor is taken), a
// goroutine running for 10 ms is preempted, and the network is polled if
// nobody did for 10 ms. Every other timed sleep of the process may end up
// to Default later too: the Go runtime waits for its timers in epoll with a
// millisecond timeout already, so a display tick can come that much later;
// nothing waits on a timer on the path of a frame that passes through.
//
// # Setting it
//
// The slack is set in a C constructor, which runs before the Go runtime
// creates its first thread; the runtime's threads then inherit it. The
// environment variable EnvVar, when set to a whole number of nanoseconds,
// replaces Default (50000 is the kernel's usual default; 0 leaves the slack
// the process inherited, for example from systemd's TimerSlackNSec=). Any
// other value is ignored (a warning on the default logger says so) and
// Default applies; Current reports what the
// calling thread has. On other systems the package does nothing.
package timerslack

// Default is the timer slack the package sets, in nanoseconds: half a
// millisecond (see the package documentation for why and what it delays).
const Default = 500_000

// EnvVar names the environment variable that replaces Default: a whole
// number of nanoseconds, 0 to leave the inherited slack.
const EnvVar = "STOPGAP_TIMER_SLACK_NS"
