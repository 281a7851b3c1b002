package timerslack

import "strconv"

// maxSlackNs is the largest value EnvVar may give (one second); the C
// constructor refuses larger ones the same way.
const maxSlackNs = 1_000_000_000

// parseEnv reports how the C constructor reads a value of EnvVar: ok is
// false for anything but a whole number of nanoseconds from 0 to maxSlackNs
// (then Default applies).
func parseEnv(v string) (ns uint64, ok bool) {
	if v == "" || v[0] < '0' || v[0] > '9' {
		return 0, false
	}
	n, err := strconv.ParseUint(v, 10, 64)
	if err != nil || n > maxSlackNs {
		return 0, false
	}
	return n, true
}
