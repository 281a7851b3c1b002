package main

import (
	"bytes"
	"context"
	"encoding/json"
	"net/http"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"sync"
	"testing"
	"time"

	"stopgap/stream/operator"
)

// syncBuffer is a bytes.Buffer safe for the relay's goroutines.
type syncBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (s *syncBuffer) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.Write(p)
}

func (s *syncBuffer) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}

// startRelay runs "stopgap relay" until the returned stop is called and
// returns the console's base URL.
func startRelay(t *testing.T, args ...string) (base string, stop func() string) {
	t.Helper()
	ctx, cancel := context.WithCancel(context.Background())
	var out, errb syncBuffer
	done := make(chan int, 1)
	go func() { done <- run(ctx, append([]string{"relay"}, args...), &out, &errb) }()
	re := regexp.MustCompile(`operator console: (http://[^/]+)/`)
	for i := 0; i < 1500; i++ { // up to 30 s on a loaded machine
		if m := re.FindStringSubmatch(out.String()); m != nil {
			return m[1], func() string { cancel(); <-done; return errb.String() }
		}
		select {
		case code := <-done:
			t.Fatalf("relay exited with %d: %s", code, errb.String())
		case <-time.After(20 * time.Millisecond):
		}
	}
	cancel()
	<-done
	t.Fatalf("relay printed no console URL: %s %s", out.String(), errb.String())
	return "", nil
}

func consoleCall(t *testing.T, method, url, token, body string) (int, string) {
	t.Helper()
	req, _ := http.NewRequest(method, url, strings.NewReader(body))
	req.Header.Set("Authorization", "Bearer "+token)
	if body != "" {
		req.Header.Set("Content-Type", "application/json")
	}
	res, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer res.Body.Close()
	var b bytes.Buffer
	b.ReadFrom(res.Body)
	return res.StatusCode, b.String()
}

// TestRelayKeepsConsoleCutoffAcrossRestart: the operator changes the cutoff
// in the relay's console; it is in the profile store with its history, and
// the relay started again uses it. A change beyond the policy is refused by
// the console, by "stopgap operator" and for the relay's --max-age-ms, each
// naming the limit and the policy file.
func TestRelayKeepsConsoleCutoffAcrossRestart(t *testing.T) {
	dir := t.TempDir()
	cam := filepath.Join(dir, "camera.json")
	os.WriteFile(cam, []byte(`{"width": 160, "height": 90, "fx": 80, "fy": 80, "cx": 80, "cy": 45, "height_m": 1.4, "pitch_deg": 5, "roll_deg": 0, "x_offset_m": 1.5, "y_offset_m": 0}`), 0o644)
	pol := filepath.Join(dir, "policy.json")
	os.WriteFile(pol, []byte(`{"min_cutoff": 0.4, "max_cutoff": 0.9, "max_horizon_ms": 400}`), 0o644)
	tok := filepath.Join(dir, "console.token")
	const token = "console-token-0123456789"
	os.WriteFile(tok, []byte(token), 0o600)
	store := filepath.Join(dir, "operators.json")
	args := []string{"--camera", cam, "--listen", "127.0.0.1:0", "--policy", pol, "--operators", store,
		"--console-token-file", tok, "--log-json=false"}
	rec := filepath.Join(dir, "session1")

	base, stop := startRelay(t, append([]string{"--record", rec}, args...)...)
	// The operator station's controls are recorded beside the drive.
	if code, body := consoleCall(t, "POST", base+"/api/controls", token, `{"t_us": 5, "operator": "default", "steer_rad": 0.02, "throttle": 0.1, "brake": 0}`); code != 200 {
		t.Errorf("POST /api/controls: %d %s", code, body)
	}
	if code, body := consoleCall(t, "POST", base+"/api/cutoff", token, `{"cutoff": 0.65}`); code != 200 {
		t.Fatalf("console change: %d %s", code, body)
	}
	code, body := consoleCall(t, "POST", base+"/api/cutoff", token, `{"cutoff": 0.95}`)
	if code != 400 || !strings.Contains(body, pol) || !strings.Contains(body, "max_cutoff") || !strings.Contains(body, "0.9") {
		t.Errorf("console change beyond the policy: %d %s; want 400 naming the limit and %s", code, body, pol)
	}
	stop()
	if rows, err := operator.ReadControls(filepath.Join(rec, operator.ControlsFile)); err != nil || len(rows) != 1 || rows[0].SteerRad != 0.02 {
		t.Errorf("recorded controls %+v, %v", rows, err)
	}

	snap, err := operator.NewStore(store).Load()
	if err != nil {
		t.Fatal(err)
	}
	p := snap.Profiles[snap.Find("default")]
	last := p.History[len(p.History)-1]
	if p.Cutoff != 0.65 || last.Actor != operator.ActorConsole || last.To != "0.65" {
		t.Fatalf("store after the relay: cutoff %v, last change %+v", p.Cutoff, last)
	}

	base, stop = startRelay(t, args...)
	code, body = consoleCall(t, "GET", base+"/api/state", token, "")
	var st struct {
		Profile string  `json:"profile"`
		Cutoff  float64 `json:"cutoff"`
	}
	if err := json.Unmarshal([]byte(body), &st); err != nil || code != 200 || st.Cutoff != 0.65 || st.Profile != "default" {
		t.Errorf("after restart: %d %s; want profile default at 0.65", code, body)
	}
	// A command-line change reaches the running relay's console.
	var out, errb bytes.Buffer
	if c := run(context.Background(), []string{"operator", "set", "default", "--cutoff", "0.8", "--store", store, "--policy", pol}, &out, &errb); c != 0 {
		t.Fatalf("operator set: %d %s", c, errb.String())
	}
	deadline := time.Now().Add(10 * time.Second)
	for {
		_, body = consoleCall(t, "GET", base+"/api/state", token, "")
		json.Unmarshal([]byte(body), &st)
		if st.Cutoff == 0.8 || time.Now().After(deadline) {
			break
		}
		time.Sleep(100 * time.Millisecond)
	}
	if st.Cutoff != 0.8 {
		t.Errorf("the running console still shows %v after the command line set 0.8", st.Cutoff)
	}
	stop()

	refusals := []struct {
		args []string
		has  string
	}{
		{[]string{"operator", "set", "default", "--cutoff", "0.3", "--store", store, "--policy", pol}, "min_cutoff"},
		{append([]string{"relay", "--max-age-ms", "500"}, args...), "max_horizon_ms"},
	}
	for _, r := range refusals {
		var out, errb bytes.Buffer
		if c := run(context.Background(), r.args, &out, &errb); c != 1 || !strings.Contains(errb.String(), r.has) || !strings.Contains(errb.String(), pol) {
			t.Errorf("%v: exit %d, %s; want a refusal naming %s and %s", r.args[:2], c, errb.String(), r.has, pol)
		}
	}
	var errb2 bytes.Buffer
	if c := run(context.Background(), append([]string{"relay", "--min-cutoff", "0.1"}, args...), &out, &errb2); c != 2 || !strings.Contains(errb2.String(), "policy file") {
		t.Errorf("--min-cutoff: exit %d %s; want a usage error pointing at the policy file", c, errb2.String())
	}
}
