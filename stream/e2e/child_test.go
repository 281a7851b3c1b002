package e2e

import (
	"bufio"
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"net"
	"net/http"
	"net/http/pprof"
	"os"
	"os/exec"
	"os/signal"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"stopgap/stream/recording"
	"stopgap/stream/relay"
	"stopgap/stream/simvehicle"
	"stopgap/stream/whip"
)

// Some runs need real processes: a relay killed with SIGKILL, a vehicle that
// dies without a goodbye, one relay process per vehicle. The test binary
// starts itself again with childRoleEnv set, and TestMain runs the role
// instead of the tests. Roles and their environment:
//
//	relay:   serves a relay on 127.0.0.1:0 for the drive in childDriveEnv,
//	         recording into childRecordEnv when set; prints
//	         "<childReadyPrefix><base URL>" on stdout once it listens, and
//	         stops on SIGTERM or SIGINT.
//	vehicle: publishes the drive in childDriveEnv (looped) to the relay at
//	         childBaseEnv; prints "<childReadyPrefix>published" once the
//	         session is connected.
//
// With childPprofEnv=1 a relay child also serves Go's profiles
// (net/http/pprof) under /debug/pprof/ on its listener, so a benchmark can
// take a CPU profile of one relay process over its measuring window
// (profileRelays).
const (
	childRoleEnv     = "STOPGAP_E2E_CHILD"
	childDriveEnv    = "STOPGAP_E2E_CHILD_DRIVE"
	childRecordEnv   = "STOPGAP_E2E_CHILD_RECORD"
	childBaseEnv     = "STOPGAP_E2E_CHILD_BASE"
	childPprofEnv    = "STOPGAP_E2E_CHILD_PPROF"
	childReadyPrefix = "STOPGAP_E2E_READY "
)

// profileDirEnv names a directory: the benchmarks that run relay child
// processes then write a CPU profile of each relay over the measuring
// window there (see profileRelays).
const profileDirEnv = "STOPGAP_E2E_PROFILE_DIR"

func TestMain(m *testing.M) {
	if role := os.Getenv(childRoleEnv); role != "" {
		if err := runChild(role); err != nil {
			fmt.Fprintf(os.Stderr, "e2e child %s: %v\n", role, err)
			os.Exit(1)
		}
		os.Exit(0)
	}
	os.Exit(m.Run())
}

// runChild runs one child role until a signal or its work ends.
func runChild(role string) error {
	ctx, stop := signal.NotifyContext(context.Background(), syscall.SIGTERM, syscall.SIGINT)
	defer stop()
	rec, err := recording.Open(os.Getenv(childDriveEnv))
	if err != nil {
		return err
	}
	switch role {
	case "relay":
		return childRelay(ctx, rec, os.Getenv(childRecordEnv))
	case "vehicle":
		return childVehicle(ctx, rec, os.Getenv(childBaseEnv))
	}
	return fmt.Errorf("unknown role %q (want relay or vehicle)", role)
}

func childRelay(ctx context.Context, rec *recording.Recording, recordDir string) error {
	cfg, err := relayConfig(rec, recordDir)
	if err != nil {
		return err
	}
	r, err := relay.New(cfg)
	if err != nil {
		return err
	}
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return err
	}
	h := r.Handler()
	if os.Getenv(childPprofEnv) == "1" {
		mux := http.NewServeMux()
		mux.HandleFunc("/debug/pprof/profile", pprof.Profile)
		mux.Handle("/", h)
		h = mux
	}
	srv := &http.Server{Handler: h, ReadHeaderTimeout: 5 * time.Second}
	go srv.Serve(ln)
	defer srv.Close()
	fmt.Printf("%shttp://%s\n", childReadyPrefix, ln.Addr())
	return r.Run(ctx)
}

func childVehicle(ctx context.Context, rec *recording.Recording, base string) error {
	veh, err := simvehicle.New(simvehicle.Config{Recording: rec, Loop: true, CacheFrames: true})
	if err != nil {
		return err
	}
	pctx, cancel := context.WithTimeout(ctx, 10*time.Second)
	defer cancel()
	pub, err := whip.Publish(pctx, base+"/whip", ingestToken, whip.PublishConfig{
		Network: whip.Network{LoopbackOnly: true}, WireFilter: veh.Link().Keep})
	if err != nil {
		return err
	}
	defer pub.Close()
	fmt.Printf("%spublished\n", childReadyPrefix)
	if err := veh.Run(ctx, pub); err != nil && !errors.Is(err, context.Canceled) {
		return err
	}
	return nil
}

// child is a running child process of this test binary.
type child struct {
	cmd   *exec.Cmd
	ready string // what followed childReadyPrefix
	done  chan error
}

// startChild starts the test binary in role with env (KEY=VALUE) and waits
// up to 30 s for its ready line. The child is killed at the end of the test
// if it still runs.
func startChild(t testing.TB, role string, env ...string) *child {
	t.Helper()
	exe, err := os.Executable()
	if err != nil {
		t.Fatal(err)
	}
	cmd := exec.Command(exe)
	cmd.Env = append(append(os.Environ(), childRoleEnv+"="+role), env...)
	cmd.Stderr = os.Stderr
	out, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatalf("start %s child: %v", role, err)
	}
	c := &child{cmd: cmd, done: make(chan error, 1)}
	readyCh := make(chan string, 1)
	go func() {
		sc := bufio.NewScanner(out)
		for sc.Scan() {
			if s, ok := strings.CutPrefix(sc.Text(), childReadyPrefix); ok {
				select {
				case readyCh <- s:
				default:
				}
			}
		}
		c.done <- cmd.Wait()
	}()
	t.Cleanup(func() { c.kill(t) })
	select {
	case c.ready = <-readyCh:
	case err := <-c.done:
		c.done <- err
		t.Fatalf("%s child ended before it was ready: %v", role, err)
	case <-time.After(30 * time.Second):
		t.Fatalf("%s child not ready after 30 s", role)
	}
	return c
}

// pid is the child's process id.
func (c *child) pid() int { return c.cmd.Process.Pid }

// kill sends SIGKILL (no goodbye of any kind) and waits for the process.
func (c *child) kill(t testing.TB) {
	if c.cmd.ProcessState != nil {
		return
	}
	_ = c.cmd.Process.Signal(syscall.SIGKILL)
	select {
	case <-c.done:
	case <-time.After(10 * time.Second):
		t.Errorf("child %d did not end 10 s after SIGKILL", c.pid())
	}
}

// terminate sends SIGTERM and waits up to 10 s for a clean exit.
func (c *child) terminate(t testing.TB) error {
	if err := c.cmd.Process.Signal(syscall.SIGTERM); err != nil {
		return err
	}
	select {
	case err := <-c.done:
		return err
	case <-time.After(10 * time.Second):
		return errors.New("no exit 10 s after SIGTERM")
	}
}

// procCPU returns a process's user + system CPU time from /proc/PID/stat
// (proc(5): fields 14 utime and 15 stime, in clock ticks; Linux's user-space
// tick is 100 Hz on every architecture Go supports here, sysconf(_SC_CLK_TCK)).
func procCPU(pid int) (time.Duration, error) {
	b, err := os.ReadFile(filepath.Join("/proc", strconv.Itoa(pid), "stat"))
	if err != nil {
		return 0, err
	}
	// The command name (field 2) is in parentheses and may hold spaces.
	i := strings.LastIndexByte(string(b), ')')
	if i < 0 {
		return 0, fmt.Errorf("/proc/%d/stat: no command field", pid)
	}
	f := strings.Fields(string(b[i+1:])) // f[0] is field 3
	if len(f) < 13 {
		return 0, fmt.Errorf("/proc/%d/stat: %d fields", pid, len(f)+2)
	}
	ut, err1 := strconv.ParseInt(f[11], 10, 64)
	st, err2 := strconv.ParseInt(f[12], 10, 64)
	if err := errors.Join(err1, err2); err != nil {
		return 0, fmt.Errorf("/proc/%d/stat: %w", pid, err)
	}
	const clkTck = 100
	return time.Duration(ut+st) * time.Second / clkTck, nil
}

// procRSS returns a process's resident set size in bytes (/proc/PID/statm,
// second field, in pages).
func procRSS(pid int) (int64, error) {
	b, err := os.ReadFile(filepath.Join("/proc", strconv.Itoa(pid), "statm"))
	if err != nil {
		return 0, err
	}
	f := strings.Fields(string(b))
	if len(f) < 2 {
		return 0, fmt.Errorf("/proc/%d/statm: %q", pid, b)
	}
	pages, err := strconv.ParseInt(f[1], 10, 64)
	return pages * int64(os.Getpagesize()), err
}

// procSwitches returns the context switches of every thread of a process
// (proc(5): voluntary_ctxt_switches and nonvoluntary_ctxt_switches in
// /proc/PID/task/TID/status, summed). A thread that ended is no longer
// counted; the relay's threads live as long as the process.
func procSwitches(pid int) (int64, error) {
	dir := filepath.Join("/proc", strconv.Itoa(pid), "task")
	tasks, err := os.ReadDir(dir)
	if err != nil {
		return 0, err
	}
	var sum int64
	for _, t := range tasks {
		b, err := os.ReadFile(filepath.Join(dir, t.Name(), "status"))
		if errors.Is(err, os.ErrNotExist) {
			continue // the thread ended meanwhile
		}
		if err != nil {
			return 0, err
		}
		for _, line := range strings.Split(string(b), "\n") {
			k, v, ok := strings.Cut(line, ":")
			if !ok || (k != "voluntary_ctxt_switches" && k != "nonvoluntary_ctxt_switches") {
				continue
			}
			n, err := strconv.ParseInt(strings.TrimSpace(v), 10, 64)
			if err != nil {
				return 0, fmt.Errorf("%s/%s/status: %q: %w", dir, t.Name(), line, err)
			}
			sum += n
		}
	}
	return sum, nil
}

// relayChildEnv is the environment of a relay child in a benchmark: the
// drive, and the profile endpoint when profileDirEnv is set.
func relayChildEnv(drive string) []string {
	env := []string{childDriveEnv + "=" + drive}
	if os.Getenv(profileDirEnv) != "" {
		env = append(env, childPprofEnv+"=1")
	}
	return env
}

// profileRelays starts, when profileDirEnv is set, a CPU profile of each
// relay child at base URL bases[i] over the next d, written to
// $STOPGAP_E2E_PROFILE_DIR/<name>-relay<i>.pprof. The returned wait blocks
// until every profile is written (a profile that fails is logged, not
// fatal: it only explains the figures). Without profileDirEnv it does
// nothing.
func profileRelays(tb testing.TB, name string, bases []string, d time.Duration) (wait func()) {
	dir := os.Getenv(profileDirEnv)
	if dir == "" {
		return func() {}
	}
	var wg sync.WaitGroup
	for i, base := range bases {
		wg.Add(1)
		go func() {
			defer wg.Done()
			path := filepath.Join(dir, fmt.Sprintf("%s-relay%d.pprof", name, i))
			url := fmt.Sprintf("%s/debug/pprof/profile?seconds=%d", base, int(math.Ceil(d.Seconds())))
			resp, err := http.Get(url)
			if err != nil {
				tb.Logf("profile of relay %d: %v", i, err)
				return
			}
			defer resp.Body.Close()
			if resp.StatusCode != http.StatusOK {
				tb.Logf("profile of relay %d: %s", i, resp.Status)
				return
			}
			f, err := os.Create(path)
			if err == nil {
				_, err = io.Copy(f, resp.Body)
				err = errors.Join(err, f.Close())
			}
			if err != nil {
				tb.Logf("profile of relay %d: %v", i, err)
				return
			}
			tb.Logf("CPU profile of relay %d over %v: %s", i, d, path)
		}()
	}
	return wg.Wait
}
