package operator

import (
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"
)

// helperEnv makes the test binary act as a second writer process (see
// TestMain).
const helperEnv = "STOPGAP_OPERATOR_TEST_WRITER"

// TestMain runs the writer helper when the test binary is started by
// writerProcess: "<store path>,<profile>,<changes>".
func TestMain(m *testing.M) {
	if v := os.Getenv(helperEnv); v != "" {
		os.Exit(runWriter(v))
	}
	os.Exit(m.Run())
}

// runWriter makes n notes changes to one profile as the command line, each
// a read-modify-write of the whole store, and exits 0 if all succeeded.
// With n < 0 it writes until killed.
func runWriter(spec string) int {
	parts := strings.Split(spec, ",")
	n, _ := strconv.Atoi(parts[2])
	e := Editor{Store: NewStore(parts[0]), Policy: DefaultPolicy(), Actor: ActorCLI, User: "pid" + strconv.Itoa(os.Getpid())}
	for i := 0; n < 0 || i < n; i++ {
		notes := fmt.Sprintf("pid %d change %d", os.Getpid(), i)
		if _, err := e.Change(parts[1], Set{Notes: &notes}); err != nil {
			fmt.Fprintln(os.Stderr, err)
			return 1
		}
	}
	return 0
}

func writerProcess(t *testing.T, path, profile string, n int) *exec.Cmd {
	t.Helper()
	exe, err := os.Executable()
	if err != nil {
		t.Fatal(err)
	}
	cmd := exec.Command(exe, "-test.run=^$")
	cmd.Env = append(os.Environ(), helperEnv+"="+path+","+profile+","+strconv.Itoa(n))
	cmd.Stderr = os.Stderr
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	return cmd
}

func newTestStore(t *testing.T) (*Store, Editor) {
	t.Helper()
	s := NewStore(filepath.Join(t.TempDir(), "operators.json"))
	e := Editor{Store: s, Policy: DefaultPolicy(), Actor: ActorCLI, User: "test",
		Now: func() time.Time { return time.Date(2026, 1, 2, 3, 4, 5, 0, time.UTC) }}
	if _, err := e.Add("alice", 0.6, Set{Reason: "first"}); err != nil {
		t.Fatal(err)
	}
	return s, e
}

func TestEditorHistory(t *testing.T) {
	s, e := newTestStore(t)
	if _, err := e.Add("bob", 0.7, Set{Notes: ptr("night shifts")}); err != nil {
		t.Fatal(err)
	}
	if _, err := e.Change("alice", Set{Cutoff: ptr(0.65), Reason: "felt late"}); err != nil {
		t.Fatal(err)
	}
	if _, err := e.Change("alice", Set{Cutoff: ptr(0.65)}); err != nil { // same value: no entry
		t.Fatal(err)
	}
	if _, err := e.Change("bob", Set{LabelSize: ptr(LabelLarge), Activate: true}); err != nil {
		t.Fatal(err)
	}
	tune := Editor{Store: s, Policy: DefaultPolicy(), Actor: ActorTune}
	if _, err := tune.Propose("alice", 0.8, "fit-20260102-1", "95% CI [0.7, 0.9]"); err != nil {
		t.Fatal(err)
	}
	snap, err := s.Load()
	if err != nil {
		t.Fatal(err)
	}
	if snap.Active != "bob" {
		t.Errorf("active %q, want bob", snap.Active)
	}
	alice := snap.Profiles[snap.Find("alice")]
	if alice.Cutoff != 0.65 {
		t.Errorf("alice cutoff %v, want 0.65 (a proposal is not applied)", alice.Cutoff)
	}
	wantActs := []Action{ActionAdd, ActionCutoff, ActionPropose}
	if len(alice.History) != len(wantActs) {
		t.Fatalf("alice history %+v, want %v", alice.History, wantActs)
	}
	for i, a := range wantActs {
		if alice.History[i].Action != a || alice.History[i].Seq != i+1 {
			t.Errorf("entry %d = %+v, want action %s seq %d", i, alice.History[i], a, i+1)
		}
	}
	c := alice.History[1]
	if c.From != "0.6" || c.To != "0.65" || c.Reason != "felt late" || c.Actor != ActorCLI || c.User != "test" {
		t.Errorf("cutoff entry %+v", c)
	}
	if p := alice.History[2]; p.Actor != ActorTune || p.Run != "fit-20260102-1" || p.To != "0.8" {
		t.Errorf("proposal entry %+v", p)
	}
	// Applying is a separate, explicit action, checked against the policy.
	if _, err := tune.Apply("alice", 0, ""); !errors.Is(err, ErrRefused) {
		t.Errorf("tune applying its own proposal: %v, want refused (default policy)", err)
	}
	snap, err = e.Apply("alice", 0, "")
	if err != nil {
		t.Fatal(err)
	}
	alice = snap.Profiles[snap.Find("alice")]
	last := alice.History[len(alice.History)-1]
	if alice.Cutoff != 0.8 || last.Action != ActionApply || last.Proposal != 3 || last.Run != "fit-20260102-1" {
		t.Errorf("after apply: cutoff %v, last entry %+v", alice.Cutoff, last)
	}
	if _, err := e.Remove("bob"); err == nil {
		t.Error("removing the active profile while others exist: want an error")
	}
	if _, err := e.Remove("alice"); err != nil {
		t.Fatal(err)
	}
	if snap, _ := s.Load(); len(snap.Profiles) != 1 || snap.Profiles[0].Name != "bob" {
		t.Errorf("after remove: %+v", snap.Profiles)
	}
}

func TestEditorRefusals(t *testing.T) {
	s, _ := newTestStore(t)
	pol, err := ParsePolicy("/etc/stopgap/policy.json", []byte(`{"min_cutoff": 0.55, "max_cutoff": 0.9}`))
	if err != nil {
		t.Fatal(err)
	}
	cli := Editor{Store: s, Policy: pol, Actor: ActorCLI}
	con := Editor{Store: s, Policy: pol, Actor: ActorConsole}
	tune := Editor{Store: s, Policy: pol, Actor: ActorTune}
	before, _ := os.ReadFile(s.Path())
	cases := []struct {
		name  string
		err   error
		limit string
	}{
		{"cli below min", second(cli.Change("alice", Set{Cutoff: ptr(0.5)})), "min_cutoff"},
		{"cli above max", second(cli.Change("alice", Set{Cutoff: ptr(0.95)})), "max_cutoff"},
		{"cli add below min", second(cli.Add("carol", 0.2, Set{})), "min_cutoff"},
		{"console notes", second(con.Change("alice", Set{Notes: ptr("x")})), "allow.console"},
		{"tune proposal above max", second(tune.Propose("alice", 0.95, "r1", "")), "max_cutoff"},
		{"tune sets cutoff", second(tune.Change("alice", Set{Cutoff: ptr(0.6)})), "allow.tune"},
	}
	for _, tc := range cases {
		var pe *PolicyError
		if !errors.As(tc.err, &pe) || pe.Limit != tc.limit || !strings.Contains(tc.err.Error(), "/etc/stopgap/policy.json") {
			t.Errorf("%s: %v, want a refusal by %s naming the file", tc.name, tc.err, tc.limit)
		}
	}
	after, _ := os.ReadFile(s.Path())
	if string(before) != string(after) {
		t.Error("a refused change modified the store")
	}
	// A proposal recorded under a wider policy is refused at apply time by a
	// narrower one.
	wide := Editor{Store: s, Policy: DefaultPolicy(), Actor: ActorTune}
	if _, err := wide.Propose("alice", 0.95, "r2", ""); err != nil {
		t.Fatal(err)
	}
	if _, err := cli.Apply("alice", 0, ""); !errors.Is(err, ErrRefused) || !strings.Contains(err.Error(), "max_cutoff") {
		t.Errorf("apply beyond the policy: %v", err)
	}
}

func second[T any](_ T, err error) error { return err }

// TestConcurrentWritersOneProcess: goroutine writers never lose an update.
func TestConcurrentWritersOneProcess(t *testing.T) {
	s, e := newTestStore(t)
	const writers, each = 6, 15
	var wg sync.WaitGroup
	errs := make(chan error, writers*each)
	for w := range writers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range each {
				n := fmt.Sprintf("w%d-%d", w, i)
				if _, err := e.Change("alice", Set{Notes: &n}); err != nil {
					errs <- err
				}
			}
		}()
	}
	wg.Wait()
	close(errs)
	for err := range errs {
		t.Fatal(err)
	}
	snap, err := s.Load()
	if err != nil {
		t.Fatal(err)
	}
	if got, want := len(snap.Profiles[0].History), 1+writers*each; got != want {
		t.Errorf("history has %d entries, want %d: updates were lost", got, want)
	}
}

// TestConcurrentWritersProcesses: two other processes (the command line)
// and the console in this one write the same store at once; every change
// is kept and the file stays valid.
func TestConcurrentWritersProcesses(t *testing.T) {
	s, e := newTestStore(t)
	if _, err := e.Add("bob", 0.7, Set{}); err != nil {
		t.Fatal(err)
	}
	const each = 25
	p1 := writerProcess(t, s.Path(), "alice", each)
	p2 := writerProcess(t, s.Path(), "bob", each)
	cs := NewConsoleStore(s, DefaultPolicy())
	consoleChanges := 0
	for i := range each {
		c := 0.6 + float64(i%2)*0.1
		name := "alice"
		if _, _, err := cs.Apply(consoleReq(&name, &c)); err != nil {
			t.Fatal(err)
		}
		consoleChanges++
	}
	for _, p := range []*exec.Cmd{p1, p2} {
		if err := p.Wait(); err != nil {
			t.Fatalf("writer process: %v", err)
		}
	}
	snap, err := s.Load()
	if err != nil {
		t.Fatal(err)
	}
	count := func(name string, a Actor) int {
		n := 0
		for _, c := range snap.Profiles[snap.Find(name)].History {
			if c.Actor == a {
				n++
			}
		}
		return n
	}
	if got := count("alice", ActorCLI) + count("bob", ActorCLI); got != 2*each+2 { // +2: the adds
		t.Errorf("command-line entries %d, want %d", got, 2*each+2)
	}
	// The console alternates 0.6 / 0.7 starting at alice's 0.6: every call
	// but the first changes the cutoff; selecting alice, already active,
	// makes no entry.
	if got := count("alice", ActorConsole); got != each-1 {
		t.Errorf("console entries %d, want %d", got, each-1)
	}
	for _, p := range snap.Profiles {
		for i, c := range p.History {
			if c.Seq != i+1 {
				t.Fatalf("%s: entry %d has seq %d", p.Name, i, c.Seq)
			}
		}
	}
}

// TestCrashMidWriteKeepsPreviousState: a writer that dies after writing its
// temporary file but before the rename leaves the previous state readable,
// and the next writer cleans up.
func TestCrashMidWriteKeepsPreviousState(t *testing.T) {
	s, e := newTestStore(t)
	before, err := s.Load()
	if err != nil {
		t.Fatal(err)
	}
	crash := errors.New("simulated crash")
	s.beforeRename = func(tmp string) error { return crash }
	if _, err := e.Change("alice", Set{Cutoff: ptr(0.9)}); !errors.Is(err, crash) {
		t.Fatalf("got %v, want the simulated crash", err)
	}
	// Leave a torn temporary file as a killed writer would.
	torn := filepath.Join(filepath.Dir(s.Path()), ".operators.json.tmp-123")
	os.WriteFile(torn, []byte(`{"format": "stopgap-operators/1", "act`), 0o644)
	after, err := s.Load()
	if err != nil || !reflect.DeepEqual(before, after) {
		t.Fatalf("after a crash: %+v, %v; want the previous state", after, err)
	}
	s.beforeRename = nil
	if _, err := e.Change("alice", Set{Cutoff: ptr(0.9)}); err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(torn); !errors.Is(err, os.ErrNotExist) {
		t.Error("the next writer left the torn temporary file")
	}
}

// TestKilledWriterProcess: a writer process killed (SIGKILL) at an arbitrary
// moment of a write loop leaves a store that loads, with a gapless history,
// and does not keep the lock.
func TestKilledWriterProcess(t *testing.T) {
	s, e := newTestStore(t)
	for _, delay := range []time.Duration{3 * time.Millisecond, 17 * time.Millisecond} {
		base, _ := s.Load()
		p := writerProcess(t, s.Path(), "alice", -1)
		// Kill it once it is writing: after its first change is stored.
		for i := 0; i < 1000; i++ {
			snap, err := s.Load()
			if err != nil {
				t.Fatal(err)
			}
			if len(snap.Profiles[0].History) > len(base.Profiles[0].History) {
				break
			}
			time.Sleep(2 * time.Millisecond)
		}
		time.Sleep(delay)
		p.Process.Signal(syscall.SIGKILL)
		p.Wait()
		snap, err := s.Load()
		if err != nil {
			t.Fatalf("after kill: %v", err)
		}
		for i, c := range snap.Profiles[0].History {
			if c.Seq != i+1 {
				t.Fatalf("entry %d has seq %d", i, c.Seq)
			}
		}
		if _, err := e.Change("alice", Set{Reason: "after kill", Cutoff: ptr(0.6 + float64(delay%3)/100)}); err != nil {
			t.Fatalf("writing after the kill: %v", err)
		}
	}
}

func TestLoadOldConsoleFile(t *testing.T) {
	path := filepath.Join(t.TempDir(), "profiles.json")
	os.WriteFile(path, []byte(`{"active": "b", "profiles": [{"name": "b", "cutoff": 0.7}, {"name": "a", "cutoff": 0.6}]}`), 0o644)
	snap, err := NewStore(path).Load()
	if err != nil {
		t.Fatal(err)
	}
	if snap.Active != "b" || len(snap.Profiles) != 2 || snap.Profiles[0].Name != "a" {
		t.Errorf("got %+v", snap)
	}
}

func TestParseStoreErrors(t *testing.T) {
	tests := []struct{ name, data, has string }{
		{"unknown key", `{"active": "a", "profiles": [{"name": "a", "cutoff": 0.5, "colour": 1}]}`, "colour"},
		{"cutoff above 1", `{"active": "a", "profiles": [{"name": "a", "cutoff": 1.5}]}`, "[0, 1]"},
		{"bad name", `{"active": "a/b", "profiles": [{"name": "a/b", "cutoff": 0.5}]}`, "a/b"},
		{"duplicate", `{"active": "a", "profiles": [{"name": "a", "cutoff": 0.5}, {"name": "a", "cutoff": 0.6}]}`, "twice"},
		{"active missing", `{"active": "z", "profiles": [{"name": "a", "cutoff": 0.5}]}`, "z"},
		{"seq gap", `{"active": "a", "profiles": [{"name": "a", "cutoff": 0.5, "history": [{"seq": 2, "actor": "cli", "action": "add"}]}]}`, "seq 2"},
		{"future format", `{"format": "stopgap-operators/9", "active": "", "profiles": []}`, "stopgap-operators/9"},
		{"label size", `{"active": "a", "profiles": [{"name": "a", "cutoff": 0.5, "label_size": "huge"}]}`, "huge"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, err := ParseStore("ops.json", []byte(tc.data))
			if err == nil || !strings.Contains(err.Error(), tc.has) || !strings.Contains(err.Error(), "ops.json") {
				t.Errorf("got %v, want an error naming ops.json and %q", err, tc.has)
			}
		})
	}
}

// FuzzParseStore: whatever ParseStore accepts is valid, and writing it out
// and parsing it again gives the same snapshot.
func FuzzParseStore(f *testing.F) {
	f.Add([]byte(`{"active": "a", "profiles": [{"name": "a", "cutoff": 0.5}]}`))
	f.Add([]byte(`{"format": "stopgap-operators/1", "active": "", "profiles": []}`))
	f.Add([]byte(`{"active": "x y", "profiles": [{"name": "x y", "cutoff": 1, "label_size": "large", "notes": "n",
		"history": [{"seq": 1, "time": "2026-01-02T03:04:05Z", "actor": "tune", "action": "propose", "from": "0.5", "to": "0.7", "run": "r"}]}]}`))
	f.Add([]byte(`{"active": "a", "profiles": [{"name": "a", "cutoff": 0.5}, {"name": "a", "cutoff": 0.6}]}`))
	f.Fuzz(func(t *testing.T, data []byte) {
		snap, err := ParseStore("s.json", data)
		if err != nil {
			var fe *FileError
			if !errors.As(err, &fe) || fe.Path != "s.json" {
				t.Fatalf("error %v is not a *FileError naming s.json", err)
			}
			return
		}
		for i := 1; i < len(snap.Profiles); i++ {
			if snap.Profiles[i-1].Name >= snap.Profiles[i].Name {
				t.Fatalf("profiles not sorted or duplicated: %q, %q", snap.Profiles[i-1].Name, snap.Profiles[i].Name)
			}
		}
		out, err := json.Marshal(storeFile{Format: FileFormat, Active: snap.Active, Profiles: snap.Profiles})
		if err != nil {
			t.Fatal(err)
		}
		again, err := ParseStore("s.json", out)
		if err != nil {
			t.Fatalf("re-parse: %v", err)
		}
		if !reflect.DeepEqual(normalise(snap), normalise(again)) {
			t.Fatalf("round trip differs:\n%+v\n%+v", snap, again)
		}
	})
}

// normalise makes times comparable with DeepEqual (monotonic and location
// data do not survive JSON).
func normalise(s Snapshot) Snapshot {
	for i := range s.Profiles {
		for j := range s.Profiles[i].History {
			h := &s.Profiles[i].History[j]
			h.Time = time.Unix(0, h.Time.UnixNano()).UTC()
		}
	}
	return s
}
