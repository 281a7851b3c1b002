package timerslack

import "testing"

func TestParseEnv(t *testing.T) {
	for _, c := range []struct {
		in string
		ns uint64
		ok bool
	}{
		{"0", 0, true},
		{"50000", 50000, true},
		{"1000000000", 1000000000, true},
		{"1000000001", 0, false},
		{"", 0, false},
		{"-1", 0, false},
		{"+5", 0, false},
		{" 5", 0, false},
		{"5ms", 0, false},
		{"99999999999999999999999", 0, false},
	} {
		ns, ok := parseEnv(c.in)
		if ns != c.ns || ok != c.ok {
			t.Errorf("parseEnv(%q) = %d, %v; want %d, %v", c.in, ns, ok, c.ns, c.ok)
		}
	}
}
