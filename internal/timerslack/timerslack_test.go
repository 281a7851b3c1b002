package timerslack

import (
	"os"
	"os/exec"
	"runtime"
	"strconv"
	"strings"
	"testing"
)

// TestDefaultMatchesC: the constructor (C) and the documented constants
// (Go) agree.
func TestDefaultMatchesC(t *testing.T) {
	if got := cDefault(); got != Default {
		t.Errorf("C default %d ns, Go Default %d ns", got, Default)
	}
	if got := cEnvVar(); got != EnvVar {
		t.Errorf("C environment variable %q, Go EnvVar %q", got, EnvVar)
	}
}

// childEnv marks the test binary run as a child by TestEveryThread.
const childEnv = "STOPGAP_TIMERSLACK_TEST_CHILD"

// TestEveryThread runs this test binary again with EnvVar set to several
// values and reads the slack of every thread of that process from /proc:
// all threads (the runtime's monitor among them, created before any Go code
// ran) have the value asked for, Default without the variable or with a
// value that is not a number, and the inherited one with 0.
func TestEveryThread(t *testing.T) {
	if os.Getenv(childEnv) != "" {
		t.Skip("child")
	}
	if runtime.GOOS != "linux" || Current() < 0 {
		t.Skip("timer slack is a Linux setting (cgo build)")
	}
	exe, err := os.Executable()
	if err != nil {
		t.Fatal(err)
	}
	cases := []struct {
		name string
		env  string // "" leaves the variable unset
		want int64
	}{
		{"unset", "", Default},
		{"kernel default", "50000", 50_000},
		{"one millisecond", "1000000", 1_000_000},
		{"zero keeps the inherited", "0", -1}, // set below
		{"not a number", "fast", Default},
		{"negative", "-5", Default},
		{"trailing text", "1000us", Default},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			cmd := exec.Command(exe, "-test.run", "^TestChildReport$", "-test.v")
			env := []string{childEnv + "=1"}
			for _, kv := range os.Environ() {
				if !strings.HasPrefix(kv, EnvVar+"=") {
					env = append(env, kv)
				}
			}
			if c.env != "" {
				env = append(env, EnvVar+"="+c.env)
			}
			if c.name == "zero keeps the inherited" {
				// The child inherits the slack of the thread that
				// starts it: give this one a value neither Default nor
				// the kernel's, so that keeping it shows.
				runtime.LockOSThread()
				defer runtime.UnlockOSThread()
				was := Current()
				c.want = 123_000
				if err := setCurrent(c.want); err != nil {
					t.Fatal(err)
				}
				defer setCurrent(was)
			}
			cmd.Env = env
			out, err := cmd.CombinedOutput()
			if err != nil {
				t.Fatalf("child: %v\n%s", err, out)
			}
			var got []int64
			for _, line := range strings.Split(string(out), "\n") {
				if s, ok := strings.CutPrefix(strings.TrimSpace(line), "thread slack "); ok {
					n, err := strconv.ParseInt(s, 10, 64)
					if err != nil {
						t.Fatalf("child line %q: %v", line, err)
					}
					got = append(got, n)
				}
			}
			if len(got) < 2 {
				t.Fatalf("child reported %d threads, want at least 2 (the runtime starts several)\n%s", len(got), out)
			}
			for i, n := range got {
				if n != c.want {
					t.Errorf("thread %d of %d: slack %d ns, want %d", i, len(got), n, c.want)
				}
			}
		})
	}
}

// TestChildReport prints the timer slack of every thread of this process
// when run as TestEveryThread's child.
func TestChildReport(t *testing.T) {
	if os.Getenv(childEnv) == "" {
		t.Skip("run by TestEveryThread")
	}
	tasks, err := os.ReadDir("/proc/self/task")
	if err != nil {
		t.Fatal(err)
	}
	for _, task := range tasks {
		b, err := os.ReadFile("/proc/" + task.Name() + "/timerslack_ns")
		if err != nil {
			t.Fatalf("thread %s: %v", task.Name(), err)
		}
		t.Logf("\nthread slack %s", strings.TrimSpace(string(b)))
	}
}
