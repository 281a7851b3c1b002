package station

import (
	"bufio"
	"context"
	"errors"
	"io"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"runtime"
	"strings"
	"sync"
	"testing"
	"time"

	"stopgap/internal/camera"
	"stopgap/stream/operator"
	"stopgap/stream/relay"
)

const (
	ingestToken  = "ingest-token-for-station-tests-0123456789"
	consoleToken = "console-token-for-station-tests-0123456789"
)

func relayConfig(recordDir string) relay.Config {
	return relay.Config{FPS: 30, RecordDir: recordDir, IngestToken: ingestToken, ConsoleToken: consoleToken,
		Camera: camera.Camera{Width: 320, Height: 240, Fx: 280, Fy: 280, Cx: 160, Cy: 120, HeightM: 1.4, PitchDeg: 6}}
}

// TestCheck: listener settings that would send tokens in clear text over a
// network, or half a TLS pair, are refused before anything starts.
func TestCheck(t *testing.T) {
	for _, c := range []struct {
		name string
		cfg  Config
		ok   bool
	}{
		{"loopback without TLS", Config{Listen: "127.0.0.1:0"}, true},
		{"localhost without TLS", Config{Listen: "localhost:8443"}, true},
		{"IPv6 loopback without TLS", Config{Listen: "[::1]:0"}, true},
		{"all addresses without TLS", Config{Listen: ":8443"}, false},
		{"a network address without TLS", Config{Listen: "192.0.2.7:8443"}, false},
		{"a network address with TLS", Config{Listen: "192.0.2.7:8443", CertFile: "c.pem", KeyFile: "k.pem"}, true},
		{"certificate without key", Config{Listen: "127.0.0.1:0", CertFile: "c.pem"}, false},
		{"key without certificate", Config{Listen: "127.0.0.1:0", KeyFile: "k.pem"}, false},
		{"no port", Config{Listen: "127.0.0.1"}, false},
	} {
		err := c.cfg.Check()
		if c.ok != (err == nil) {
			t.Errorf("%s: Check() = %v, want ok %v", c.name, err, c.ok)
		}
		if err != nil && !errors.Is(err, ErrConfig) {
			t.Errorf("%s: %v does not wrap ErrConfig", c.name, err)
		}
	}
}

// lineWriter hands the lines written to it to a channel.
type lineWriter struct {
	mu    sync.Mutex
	buf   strings.Builder
	lines chan string
}

func (w *lineWriter) Write(p []byte) (int, error) {
	w.mu.Lock()
	defer w.mu.Unlock()
	w.buf.Write(p)
	for {
		s := w.buf.String()
		i := strings.IndexByte(s, '\n')
		if i < 0 {
			break
		}
		w.lines <- s[:i]
		w.buf.Reset()
		w.buf.WriteString(s[i+1:])
	}
	return len(p), nil
}

// TestServe: the service announces its endpoints, answers its probes, guards
// the command channel with the console token, writes the control log into
// the recording, and ends cleanly with its context.
func TestServe(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "rec")
	out := &lineWriter{lines: make(chan string, 16)}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- Serve(ctx, Config{Relay: relayConfig(dir), Listen: "127.0.0.1:0", Out: out}) }()
	var base string
	deadline := time.After(20 * time.Second)
	for base == "" {
		select {
		case l := <-out.lines:
			if rest, ok := strings.CutPrefix(l, "WHIP endpoint: "); ok {
				base = strings.TrimSuffix(rest, "/whip")
			}
		case err := <-done:
			t.Fatalf("Serve ended before announcing its endpoint: %v", err)
		case <-deadline:
			t.Fatal("no WHIP endpoint announced within 20 s")
		}
	}
	do := func(method, path, token string) int {
		t.Helper()
		req, _ := http.NewRequest(method, base+path, strings.NewReader("{}"))
		if token != "" {
			req.Header.Set("Authorization", "Bearer "+token)
		}
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		io.Copy(io.Discard, resp.Body)
		resp.Body.Close()
		return resp.StatusCode
	}
	if c := do(http.MethodGet, "/healthz", ""); c != http.StatusOK {
		t.Errorf("/healthz: %d, want 200", c)
	}
	if c := do(http.MethodPost, "/api/controls", ""); c != http.StatusUnauthorized {
		t.Errorf("/api/controls without a token: %d, want 401", c)
	}
	if c := do(http.MethodGet, "/metrics", "wrong-token"); c != http.StatusUnauthorized {
		t.Errorf("/metrics with a wrong token: %d, want 401", c)
	}
	cancel()
	select {
	case err := <-done:
		if err != nil {
			t.Errorf("Serve after its context ended: %v, want nil", err)
		}
	case <-time.After(20 * time.Second):
		t.Fatal("Serve did not end within 20 s of its context")
	}
	f, err := os.Open(filepath.Join(dir, operator.ControlsFile))
	if err != nil {
		t.Fatalf("the control log beside the recording: %v", err)
	}
	defer f.Close()
	if sc := bufio.NewScanner(f); !sc.Scan() || sc.Text() != operator.ControlsHeader {
		t.Errorf("control log header %q, want %q", sc.Text(), operator.ControlsHeader)
	}
}

// TestServeReleasesOnFailedStart: when the address is taken, Serve says so
// and leaves nothing running behind it: the recording it had opened is
// closed (its directory can be removed and the same relay configuration
// started again elsewhere), and no goroutine of it is left.
func TestServeReleasesOnFailedStart(t *testing.T) {
	busy, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer busy.Close()
	before := goroutines()
	dir := filepath.Join(t.TempDir(), "rec")
	err = Serve(context.Background(), Config{Relay: relayConfig(dir), Listen: busy.Addr().String()})
	if err == nil || !strings.Contains(err.Error(), "listen on") {
		t.Fatalf("Serve on a taken address: %v, want a listen error", err)
	}
	// The relay's goroutines (recording, ingest) end with it.
	deadline := time.Now().Add(10 * time.Second)
	for goroutines() > before && time.Now().Before(deadline) {
		time.Sleep(20 * time.Millisecond)
	}
	if n := goroutines(); n > before {
		t.Errorf("%d goroutines after the failed start, %d before: the relay was not released", n, before)
	}
	if _, err := os.Stat(filepath.Join(dir, relay.ShownFile)); err != nil {
		t.Errorf("the recording's tick log: %v", err)
	}
}

func goroutines() int { return runtime.NumGoroutine() }
