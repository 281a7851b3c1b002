// Package consoletest drives the stopgap operator page in a real headless
// Chromium for tests: launch, open the console URL, wait for displayed
// states, read the page's state log, take screenshots. It is used by the
// console's own tests and by the relay's end-to-end test.
//
// It needs Debian's chromium (apt-get install chromium); tests call
// RequireChromium to skip with a clear message when it is missing. All
// traffic stays on loopback.
package consoletest

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/chromedp/cdproto/runtime"
	"github.com/chromedp/chromedp"

	"stopgap/stream/console"
)

// DefaultChromium is where Debian's chromium package installs the browser.
const DefaultChromium = "/usr/bin/chromium"

// ErrTimeout is wrapped by waits that did not see the expected value in time.
var ErrTimeout = errors.New("consoletest: timed out")

// ChromiumPath returns $STOPGAP_CHROMIUM if set, else DefaultChromium, or ""
// when that file does not exist.
func ChromiumPath() string {
	p := os.Getenv("STOPGAP_CHROMIUM")
	if p == "" {
		p = DefaultChromium
	}
	if st, err := os.Stat(p); err != nil || st.IsDir() {
		return ""
	}
	return p
}

// RequireChromium returns the browser path or skips t with a message saying
// how to install it.
func RequireChromium(t testing.TB) string {
	t.Helper()
	p := ChromiumPath()
	if p == "" {
		t.Skip("consoletest: chromium not installed (apt-get install -y chromium, or set STOPGAP_CHROMIUM); skipping the real-browser test")
	}
	return p
}

// ArtifactDir returns the directory for test artefacts (screenshots):
// $STOPGAP_ARTIFACTS if set, else <os.TempDir()>/stopgap-artifacts. It is
// created if needed; t fails if that is impossible.
func ArtifactDir(t testing.TB) string {
	t.Helper()
	dir := os.Getenv("STOPGAP_ARTIFACTS")
	if dir == "" {
		dir = filepath.Join(os.TempDir(), "stopgap-artifacts")
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		t.Fatalf("consoletest: artefact directory %s: %v", dir, err)
	}
	return dir
}

// Options configure Launch. Zero fields take defaults.
type Options struct {
	// ExecPath is the browser binary; default ChromiumPath().
	ExecPath string
	// Width and Height of the viewport in CSS pixels; default 1280 x 800.
	Width, Height int
	// ExtraFlags are added to the command line (name without "--" -> value;
	// true for a bare switch).
	ExtraFlags map[string]any
	// Logf receives chromedp's log and error lines; nil discards them.
	Logf func(format string, args ...any)
}

// Browser is one headless Chromium with one tab. Its methods are not safe
// for concurrent use.
type Browser struct {
	ctx         context.Context // tab context (has run once)
	cancelTab   context.CancelFunc
	cancelAlloc context.CancelFunc
	userDir     string
	w, h        int

	mu      sync.Mutex
	console []string
}

// Flags returns the command-line flags Launch uses besides the
// user-data-dir: headless, no sandbox (tests run as root in containers), no
// GPU, no QUIC, no first-run or background traffic, and loopback ICE
// candidates allowed so WebRTC works on 127.0.0.1.
func Flags() map[string]any {
	return map[string]any{
		"headless":                            true,
		"no-sandbox":                          true,
		"disable-gpu":                         true,
		"disable-quic":                        true,
		"no-first-run":                        true,
		"no-default-browser-check":            true,
		"disable-background-networking":       true,
		"disable-component-update":            true,
		"disable-sync":                        true,
		"disable-default-apps":                true,
		"disable-extensions":                  true,
		"hide-scrollbars":                     true,
		"mute-audio":                          true,
		"allow-loopback-in-peer-connection":   true,
		"autoplay-policy":                     "no-user-gesture-required",
		"disable-background-timer-throttling": true,
		"disable-renderer-backgrounding":      true,
	}
}

// Launch starts the browser with a fresh user-data-dir (removed by Close)
// and opens a blank tab. ctx bounds the browser's whole life.
func Launch(ctx context.Context, opts Options) (*Browser, error) {
	if opts.ExecPath == "" {
		opts.ExecPath = ChromiumPath()
	}
	if opts.ExecPath == "" {
		return nil, errors.New("consoletest: chromium not found; apt-get install -y chromium or set STOPGAP_CHROMIUM")
	}
	if opts.Width <= 0 {
		opts.Width = 1280
	}
	if opts.Height <= 0 {
		opts.Height = 800
	}
	dir, err := os.MkdirTemp("", "stopgap-chromium-")
	if err != nil {
		return nil, fmt.Errorf("consoletest: user data dir: %w", err)
	}
	allocOpts := []chromedp.ExecAllocatorOption{
		chromedp.ExecPath(opts.ExecPath),
		chromedp.UserDataDir(dir),
		chromedp.WindowSize(opts.Width, opts.Height),
	}
	for k, v := range Flags() {
		allocOpts = append(allocOpts, chromedp.Flag(k, v))
	}
	for k, v := range opts.ExtraFlags {
		allocOpts = append(allocOpts, chromedp.Flag(k, v))
	}
	allocCtx, cancelAlloc := chromedp.NewExecAllocator(ctx, allocOpts...)
	logf := opts.Logf
	if logf == nil {
		logf = func(string, ...any) {}
	}
	tabCtx, cancelTab := chromedp.NewContext(allocCtx, chromedp.WithLogf(logf), chromedp.WithErrorf(logf))
	b := &Browser{ctx: tabCtx, cancelTab: cancelTab, cancelAlloc: cancelAlloc, userDir: dir, w: opts.Width, h: opts.Height}
	// The first Run starts the browser; it must not carry a timeout.
	if err := chromedp.Do(tabCtx, chromedp.EmulateViewport(int64(opts.Width), int64(opts.Height))); err != nil {
		b.Close()
		return nil, fmt.Errorf("consoletest: start %s: %w", opts.ExecPath, err)
	}
	if err := chromedp.Listen(tabCtx, b.onEvent); err != nil {
		b.Close()
		return nil, fmt.Errorf("consoletest: listen: %w", err)
	}
	return b, nil
}

// onEvent records console output and uncaught exceptions of the page.
func (b *Browser) onEvent(ev any) {
	var line string
	switch e := ev.(type) {
	case *runtime.EventConsoleAPICalled:
		parts := make([]string, 0, len(e.Args))
		for _, a := range e.Args {
			if a.Description != "" {
				parts = append(parts, a.Description)
			} else {
				parts = append(parts, strings.Trim(string(a.Value), `"`))
			}
		}
		line = "console." + string(e.Type) + ": " + strings.Join(parts, " ")
	case *runtime.EventExceptionThrown:
		line = "exception: " + (&chromedp.ExceptionError{ExceptionDetails: e.ExceptionDetails}).Error()
	default:
		return
	}
	b.mu.Lock()
	b.console = append(b.console, line)
	b.mu.Unlock()
}

// ConsoleLog returns the page's console lines and uncaught exceptions so far.
func (b *Browser) ConsoleLog() []string {
	b.mu.Lock()
	defer b.mu.Unlock()
	return append([]string(nil), b.console...)
}

// Open navigates the tab to url and waits until the page's body exists.
func (b *Browser) Open(url string, timeout time.Duration) error {
	ctx, cancel := context.WithTimeout(b.ctx, timeout)
	defer cancel()
	if err := chromedp.Do(ctx, chromedp.Navigate(url), chromedp.WaitReady("body")); err != nil {
		return fmt.Errorf("consoletest: open page: %w", err)
	}
	return nil
}

// Eval evaluates a JavaScript expression (awaiting it if it is a promise)
// and decodes its JSON value into out (a pointer), or ignores the value when
// out is nil.
func (b *Browser) Eval(expr string, out any) error {
	ctx, cancel := context.WithTimeout(b.ctx, 5*time.Second)
	defer cancel()
	raw, err := chromedp.Run(ctx, chromedp.Evaluate[json.RawMessage](expr, chromedp.EvalAwaitPromise))
	if err != nil && !errors.Is(err, chromedp.ErrJSUndefined) {
		return fmt.Errorf("consoletest: eval %q: %w", expr, err)
	}
	if out == nil || raw == nil {
		return nil
	}
	if err := json.Unmarshal(raw, out); err != nil {
		return fmt.Errorf("consoletest: eval %q: decode %s: %w", expr, raw, err)
	}
	return nil
}

// Attr returns the attribute of <body> (e.g. "data-state"), "" when absent.
func (b *Browser) Attr(name string) (string, error) {
	var v *string
	if err := b.Eval("document.body ? document.body.getAttribute("+strconv.Quote(name)+") : null", &v); err != nil {
		return "", err
	}
	if v == nil {
		return "", nil
	}
	return *v, nil
}

// State returns the displayed state: one of display.States' names, or UNKNOWN.
func (b *Browser) State() (string, error) { return b.Attr("data-state") }

// WaitAttr polls every 20 ms until <body>'s attribute equals want. The
// error wraps ErrTimeout and says what was seen last.
func (b *Browser) WaitAttr(name, want string, timeout time.Duration) error {
	return b.WaitFunc(func() (bool, string, error) {
		v, err := b.Attr(name)
		return v == want, name + "=" + strconv.Quote(v), err
	}, "body "+name+"="+strconv.Quote(want), timeout)
}

// WaitState waits until the displayed state is want.
func (b *Browser) WaitState(want string, timeout time.Duration) error {
	return b.WaitAttr("data-state", want, timeout)
}

// WaitFunc polls cond every 20 ms until it reports true, an error, or the
// timeout; what describes the goal and seen the last observation for the
// error message.
func (b *Browser) WaitFunc(cond func() (ok bool, seen string, err error), what string, timeout time.Duration) error {
	deadline := time.Now().Add(timeout)
	seen := ""
	for {
		ok, s, err := cond()
		if err != nil {
			return err
		}
		if ok {
			return nil
		}
		seen = s
		if time.Now().After(deadline) {
			return fmt.Errorf("%w after %v waiting for %s; last seen %s", ErrTimeout, timeout, what, seen)
		}
		time.Sleep(20 * time.Millisecond)
	}
}

// StateChange is one entry of the page's window.__stateLog: the displayed
// state, or the reason given for UNKNOWN (one of console.UnknownReasons),
// changed to State and Reason at TMs milliseconds of the page clock
// (performance.now()).
type StateChange struct {
	State  string  `json:"state"`
	Reason string  `json:"reason"`
	TMs    float64 `json:"t_ms"`
}

// WaitLogged polls the page's state log every 20 ms until it has an entry
// of the given state at or after sinceMs (page clock) and returns the first
// such entry. Unlike WaitState it sees a state the page showed only for a
// moment (a PREDICTED tick followed in the same millisecond by a NOT_SHOWN
// one on a busy relay), which polling the displayed state can miss. The
// error wraps ErrTimeout and gives the log's entries since sinceMs.
func (b *Browser) WaitLogged(state string, sinceMs float64, timeout time.Duration) (StateChange, error) {
	var found StateChange
	err := b.WaitFunc(func() (bool, string, error) {
		log, err := b.StateLog()
		if err != nil {
			return false, "", err
		}
		var since []StateChange
		for _, c := range log {
			if c.TMs < sinceMs {
				continue
			}
			if c.State == state {
				found = c
				return true, "", nil
			}
			since = append(since, c)
		}
		return false, fmt.Sprintf("%v", since), nil
	}, fmt.Sprintf("%s in the state log from page time %.0f ms", state, sinceMs), timeout)
	return found, err
}

// StateLog returns the page's state log.
func (b *Browser) StateLog() ([]StateChange, error) {
	var log []StateChange
	if err := b.Eval("window.__stateLog || []", &log); err != nil {
		return nil, err
	}
	return log, nil
}

// States returns just the states of the log, in order.
func States(log []StateChange) []string {
	s := make([]string, len(log))
	for i, c := range log {
		s[i] = c.State
	}
	return s
}

// Screenshot writes a PNG of the viewport to path.
func (b *Browser) Screenshot(path string) error {
	ctx, cancel := context.WithTimeout(b.ctx, 10*time.Second)
	defer cancel()
	png, err := chromedp.Run(ctx, chromedp.CaptureScreenshot())
	if err != nil {
		return fmt.Errorf("consoletest: screenshot: %w", err)
	}
	if err := os.WriteFile(path, png, 0o644); err != nil {
		return fmt.Errorf("consoletest: screenshot: %w", err)
	}
	return nil
}

// Close stops the browser and removes its user-data-dir.
func (b *Browser) Close() error {
	b.cancelTab()
	b.cancelAlloc()
	var err error
	for range 50 { // child processes may still write for a moment
		if err = os.RemoveAll(b.userDir); err == nil {
			return nil
		}
		time.Sleep(50 * time.Millisecond)
	}
	return fmt.Errorf("consoletest: remove %s: %w", b.userDir, err)
}

// IsStall reports whether c is a STATE UNKNOWN entry that a stall caused
// (console.IsStall: reason "meta-silent", "video-frozen" or "status-late").
func IsStall(c StateChange) bool {
	return c.State == Unknown && console.IsStall(c.Reason)
}

// Unknown is the page's data-state while it shows STATE UNKNOWN.
const Unknown = "UNKNOWN"

// WithoutStalls returns the states of log with the STATE UNKNOWN entries that a
// stall caused (IsStall, not the first entry) removed and repeated states
// merged, plus the removed entries. A loaded machine can hold up status
// messages past a LIVE status's limit (console.StatusLateAfterMs) or frames
// for more than 500 ms, and the page then rightly shows STATE UNKNOWN; tests
// that check the order of the relay's states use this and bound the number
// of stalls separately.
func WithoutStalls(log []StateChange) (states []string, stalls []StateChange) {
	for i, c := range log {
		if i > 0 && IsStall(c) {
			stalls = append(stalls, c)
			continue
		}
		if len(states) > 0 && states[len(states)-1] == c.State {
			continue
		}
		states = append(states, c.State)
	}
	return states, stalls
}

// ShownMs returns how long, in ms of the page clock, the page showed an
// entry of log for which match is true between fromMs and toMs: each entry
// lasts until the next one, the last until toMs.
func ShownMs(log []StateChange, match func(StateChange) bool, fromMs, toMs float64) float64 {
	total := 0.0
	for i, c := range log {
		end := toMs
		if i+1 < len(log) {
			end = min(log[i+1].TMs, toMs)
		}
		if start := max(c.TMs, fromMs); match(c) && end > start {
			total += end - start
		}
	}
	return total
}
