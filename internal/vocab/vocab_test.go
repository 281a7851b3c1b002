package vocab

import (
	"fmt"
	"math"
	"strings"
	"testing"
)

func TestAge(t *testing.T) {
	tests := []struct {
		ms   float64
		want string
	}{
		{133.4, "picture age 133 ms"},
		{0, "picture age 0 ms"},
		{999.5, "picture age 1000 ms"},
	}
	for _, tt := range tests {
		if got := Age(tt.ms); got != tt.want {
			t.Errorf("Age(%v) = %q, want %q", tt.ms, got, tt.want)
		}
	}
	if got := Age(math.NaN()); got != "picture age unknown" {
		t.Errorf("Age(NaN) = %q", got)
	}
}

func TestAppendAgeAllocs(t *testing.T) {
	buf := make([]byte, 0, 32)
	if n := testing.AllocsPerRun(100, func() { buf = AppendAge(buf[:0], 123456) }); n != 0 {
		t.Errorf("AppendAge allocates %v times per call with room in dst", n)
	}
}

// TestCautionDefers: the caution defers to local rules and licensed
// procedures and gives no orders of its own (no imperative driving words).
func TestCautionDefers(t *testing.T) {
	for _, must := range []string{"static scene only", "local regulations", "licensed procedures", "not in it"} {
		if !strings.Contains(Caution, must) {
			t.Errorf("caution lacks %q", must)
		}
	}
	for _, order := range []string{"slow down", "stop the vehicle", "do not drive", "never drive", "follow those"} {
		if strings.Contains(strings.ToLower(Caution), order) {
			t.Errorf("caution gives a driving order %q", order)
		}
	}
}

func ExampleAge() {
	fmt.Println(Age(133.4))
	// Output: picture age 133 ms
}
