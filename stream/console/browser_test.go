package console_test

import (
	"context"
	"encoding/binary"
	"fmt"
	"io"
	"log/slog"
	"math"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"regexp"
	"slices"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"stopgap/internal/display"
	"stopgap/internal/vocab"
	"stopgap/stream/console"
	"stopgap/stream/console/consoletest"
)

// readIVF returns the frames of an IVF file (32-byte file header, then per
// frame a 12-byte header: 4-byte little-endian size, 8-byte timestamp).
func readIVF(path string) ([][]byte, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, err
	}
	if len(data) < 32 || string(data[:4]) != "DKIF" || string(data[8:12]) != "VP80" {
		return nil, fmt.Errorf("%s: not a VP8 IVF file", path)
	}
	var frames [][]byte
	for off := 32; off < len(data); {
		if off+12 > len(data) {
			return nil, fmt.Errorf("%s: truncated frame header at byte %d", path, off)
		}
		n := int(binary.LittleEndian.Uint32(data[off:]))
		off += 12
		if n == 0 || off+n > len(data) {
			return nil, fmt.Errorf("%s: bad frame size %d at byte %d", path, n, off-12)
		}
		frames = append(frames, data[off:off+n])
		off += n
	}
	return frames, nil
}

// pump plays the clip in a loop at 30 fps and sends one meta message per
// frame (or per metaEvery frames) with the state the test sets. Keyframe
// requests restart the clip at its next keyframe (every 10th frame).
type pump struct {
	c         *console.Console
	frames    [][]byte
	state     atomic.Int32 // display.State
	video     atomic.Bool
	meta      atomic.Bool
	metaEvery atomic.Int32 // send meta on every metaEvery-th tick only; 0 or 1: every tick
	silent    atomic.Bool  // the link reports no packets for 1200 ms
	wantKey   atomic.Bool
	stop      chan struct{}
	done      chan struct{}
	errs      atomic.Int64
}

func (p *pump) run() {
	defer close(p.done)
	const period = time.Second / 30
	const periodMs = 1000.0 / 30
	tk := time.NewTicker(period)
	defer tk.Stop()
	idx, seq := 0, uint64(0)
	lastState, ticksInState := display.StateInvalid, 0
	for {
		select {
		case <-p.stop:
			return
		case <-tk.C:
		}
		if p.wantKey.Swap(false) && idx%10 != 0 {
			idx = (idx/10 + 1) * 10 % len(p.frames)
		}
		if p.video.Load() {
			if err := p.c.WriteFrame(p.frames[idx], period); err != nil {
				p.errs.Add(1)
			}
			idx = (idx + 1) % len(p.frames)
		}
		st := display.State(p.state.Load())
		if st != lastState {
			lastState, ticksInState = st, 0
		}
		ticksInState++
		age, conf, why := 35.0, 1.0, ""
		switch st {
		case display.StatePredicted:
			age, conf = 100+33.3*float64(ticksInState), 0.82
		case display.StateStale:
			age, conf, why = 600+33.3*float64(ticksInState), 0.31, "low-confidence"
		case display.StateNoPicture, display.StateNotShown:
			age, conf = 0, 0 // no picture on screen from this tick: no age (Meta.Validate)
		}
		seq++
		if every := uint64(max(1, p.metaEvery.Load())); p.meta.Load() && seq%every == 0 {
			link := console.LinkStats{LossPct: 7.5, JitterMs: 14, DelayMs: 92, KeyframeRequests: 4, FramesIn: seq}
			if p.silent.Load() {
				link.LossPct, link.JitterMs, link.NoPacketsMs = 0, 0, 1200
			}
			err := p.c.WriteMeta(console.Meta{
				Seq: seq, TimeUs: int64(seq) * 33333, State: st, AgeMs: age, MaxAgeMs: 3000, PeriodMs: periodMs, Why: why, Confidence: conf,
				Cutoff: p.c.Cutoff(), Profile: p.c.Profile(), Link: link,
			})
			if err != nil {
				p.errs.Add(1)
			}
		}
	}
}

// TestBrowserConsole drives the real page in headless Chromium over
// WebRTC on loopback: state sequence (NO_PICTURE first, as a session
// starts), banners, caution, no picture age without a picture, a LIVE
// status expiring on the page's clock (status-late) and not flickering at
// ordinary gaps, silence and frozen picture detection, cutoff limits,
// screenshots.
func TestBrowserConsole(t *testing.T) {
	exe := consoletest.RequireChromium(t)
	frames, err := readIVF("testdata/drive320.ivf")
	if err != nil {
		t.Fatal(err)
	}
	var changes []console.Profile
	var changesMu sync.Mutex
	p := &pump{frames: frames, stop: make(chan struct{}), done: make(chan struct{})}
	c, err := console.New(console.Config{
		Token:          "browser-test-token-0123456789",
		Limits:         console.Limits{MinCutoff: 0.3, MaxCutoff: 0.9},
		Profiles:       []console.Profile{{Name: "city", Cutoff: 0.6}, {Name: "highway", Cutoff: 0.8}},
		KeyframeNeeded: func(console.KeyframeReason) { p.wantKey.Store(true) },
		OnCutoffChange: func(name string, v float64) {
			changesMu.Lock()
			changes = append(changes, console.Profile{Name: name, Cutoff: v})
			changesMu.Unlock()
		},
		Logger: slog.New(slog.NewTextHandler(io.Discard, nil)),
	})
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	p.c = c
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	srv := &http.Server{Handler: c, ReadHeaderTimeout: 5 * time.Second}
	go srv.Serve(ln)
	defer srv.Close()

	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	b, err := consoletest.Launch(ctx, consoletest.Options{ExecPath: exe})
	if err != nil {
		t.Fatal(err)
	}
	defer b.Close()
	defer func() {
		if t.Failed() {
			for _, l := range b.ConsoleLog() {
				t.Log("page:", l)
			}
		}
	}()
	dir := consoletest.ArtifactDir(t)
	shot := func(name string) {
		t.Helper()
		path := filepath.Join(dir, name)
		if err := b.Screenshot(path); err != nil {
			t.Error(err)
			return
		}
		t.Logf("screenshot: %s", path)
	}
	must := func(err error) {
		t.Helper()
		if err != nil {
			t.Fatal(err)
		}
	}

	p.state.Store(int32(display.StateNoPicture))
	p.video.Store(true)
	p.meta.Store(true)
	go p.run()
	defer func() { close(p.stop); <-p.done }()

	must(b.Open(c.PageURL("http://"+ln.Addr().String()), 10*time.Second))
	var href string
	must(b.Eval("location.href", &href))
	if strings.Contains(href, "token") {
		t.Errorf("token still in the address bar: %s", href)
	}
	must(b.WaitAttr("data-conn", "connected", 10*time.Second))

	// Before the first real frame: NO_PICTURE, in its own words, and no
	// picture age anywhere (the relay sends age 0, which must not read as
	// a fresh picture).
	must(b.WaitState("NO_PICTURE", 5*time.Second))
	must(b.CheckCautionVisible())
	var np struct{ Banner, Age, Overlay, OverlayDisplay string }
	must(b.Eval(`({Banner: document.getElementById("banner").innerText.replace(/\s+/g, " ").trim(),
		Age: document.getElementById("v-age").textContent,
		Overlay: document.getElementById("overlay").innerText,
		OverlayDisplay: getComputedStyle(document.getElementById("overlay")).display})`, &np))
	if np.Banner != "NO_PICTURE — "+vocab.NoPicture+": the vehicle has sent no real frame in this session" {
		t.Errorf("NO_PICTURE banner %q", np.Banner)
	}
	if np.Age != "none, "+vocab.NoPicture {
		t.Errorf("NO_PICTURE picture age shown as %q", np.Age)
	}
	if np.OverlayDisplay == "none" || np.Overlay != strings.ToUpper(vocab.NoPicture) {
		t.Errorf("NO_PICTURE overlay %q (display %s), want %q over the picture", np.Overlay, np.OverlayDisplay, strings.ToUpper(vocab.NoPicture))
	}
	if ageRe := regexp.MustCompile(`\d+ ms`); ageRe.MatchString(np.Banner) || ageRe.MatchString(np.Age) {
		t.Errorf("NO_PICTURE shows a picture age: banner %q, age %q", np.Banner, np.Age)
	}
	time.Sleep(300 * time.Millisecond)
	shot("console-no_picture.png")

	p.state.Store(int32(display.StateLive))
	must(b.WaitState("LIVE", 5*time.Second))
	// the video really decodes: frames presented at the clip's size
	must(b.WaitFunc(func() (bool, string, error) {
		var v struct{ W, N int }
		err := b.Eval(`({W: document.getElementById("video").videoWidth, N: +document.body.dataset.videoFrames})`, &v)
		return v.W == 320 && v.N >= 10, fmt.Sprintf("%+v", v), err
	}, "decoded video 320 px wide, 10 frames presented", 10*time.Second))
	must(b.CheckCautionVisible())
	banner, _ := b.BannerText()
	if !regexp.MustCompile(`^LIVE real picture, picture age \d+ ms$`).MatchString(banner) {
		t.Errorf("LIVE banner %q", banner)
	}
	time.Sleep(300 * time.Millisecond)
	shot("console-live.png")

	// Link statistics, and a silent link: "no packets for N ms" instead of 0 % loss.
	linkText := func(want string) {
		t.Helper()
		must(b.WaitFunc(func() (bool, string, error) {
			var got string
			err := b.Eval(`document.getElementById("l-loss").textContent + " | " + document.getElementById("l-jitter").textContent`, &got)
			return got == want, got, err
		}, want, 3*time.Second))
	}
	linkText("7.5 % | 14 ms")
	p.silent.Store(true)
	linkText("no packets for 1200 ms | —")
	p.silent.Store(false)
	linkText("7.5 % | 14 ms")

	// LIVE -> PREDICTED -> STALE -> NOT_SHOWN -> LIVE. NOT_SHOWN keeps the
	// picture before it: its age is a lower bound counted on from that
	// picture's (STALE, at least 600 ms).
	wantBanner := map[string]*regexp.Regexp{
		"PREDICTED": regexp.MustCompile(`^PREDICTED — synthetic picture, picture age \d+ ms; moving objects not shown$`),
		"STALE":     regexp.MustCompile(`^STALE — picture age \d+ ms; confidence 0\.31 under the cutoff \d\.\d\d$`),
		"NOT_SHOWN": regexp.MustCompile(`^NOT_SHOWN — this tick could not be put on screen; the picture before it stays, picture age ≥ \d{3,} ms$`),
		"LIVE":      regexp.MustCompile(`^LIVE real picture, picture age \d+ ms$`),
	}
	for _, st := range []display.State{display.StatePredicted, display.StateStale, display.StateNotShown, display.StateLive} {
		p.state.Store(int32(st))
		must(b.WaitState(st.String(), 3*time.Second))
		if err := b.CheckCautionVisible(); err != nil {
			t.Errorf("in %s: %v", st, err)
		}
		banner, _ := b.BannerText()
		if !wantBanner[st.String()].MatchString(banner) {
			t.Errorf("%s banner %q", st, banner)
		}
		time.Sleep(400 * time.Millisecond)
		if st != display.StateLive {
			shot("console-" + strings.ToLower(st.String()) + ".png")
		}
	}
	log, err := b.StateLog()
	must(err)
	// Exactly this order. A machine loaded enough to hold frames or status
	// messages up for more than 500 ms makes the page show STATE UNKNOWN in
	// between, which is right; those are reported, and more than two fail
	// the test. One that holds a status message up past a LIVE status's
	// limit (100 ms here) makes it show STATE UNKNOWN (status-late) for a
	// moment, rightly too; that fails only if it lasted more than half the
	// time from the first LIVE on.
	got, stalls := consoletest.WithoutStalls(log)
	if want := []string{"UNKNOWN", "NO_PICTURE", "LIVE", "PREDICTED", "STALE", "NOT_SHOWN", "LIVE"}; !slices.Equal(got, want) {
		t.Fatalf("state log %v, want exactly %v (%+v)", got, want, log)
	}
	if len(stalls) > 0 {
		t.Logf("stalls during steady streaming (machine load): %+v", stalls)
	}
	long := 0
	for _, s := range stalls {
		if s.Reason != console.ReasonStatusLate {
			long++
		}
	}
	if long > 2 {
		t.Errorf("page showed STATE UNKNOWN %d times for 500 ms while frames and status flowed", long)
	}
	var nowMs float64
	must(b.Eval("performance.now()", &nowMs))
	// the order above has a LIVE
	firstLive := log[slices.IndexFunc(log, func(c consoletest.StateChange) bool { return c.State == "LIVE" })].TMs
	isLate := func(c consoletest.StateChange) bool { return c.Reason == console.ReasonStatusLate }
	if late := consoletest.ShownMs(log, isLate, firstLive, nowMs); late > (nowMs-firstLive)/2 {
		t.Errorf("page showed STATE UNKNOWN (status-late) for %.0f of %.0f ms while status came every tick", late, nowMs-firstLive)
	}

	checkStatusLate(t, b, p)

	// Status stops on a STALE tick: the state stays (it claims no current
	// picture) but the picture's age becomes a lower bound that keeps
	// growing once the status is older than a tick's limit.
	p.state.Store(int32(display.StateStale))
	must(b.WaitState("STALE", 3*time.Second))
	p.meta.Store(false)
	staleRe := regexp.MustCompile(`^STALE — picture age ≥ (\d+) ms; `)
	var ages []int
	must(b.WaitFunc(func() (bool, string, error) {
		banner, err := b.BannerText()
		m := staleRe.FindStringSubmatch(banner)
		if m != nil {
			n, _ := strconv.Atoi(m[1])
			if len(ages) == 0 || ages[len(ages)-1] != n {
				ages = append(ages, n)
			}
		}
		return len(ages) >= 2, banner, err
	}, "STALE with a growing lower-bound picture age", 3*time.Second))
	if st, _ := b.State(); st != "STALE" {
		t.Errorf("state %s while a STALE status is late, want STALE", st)
	}
	if ages[1] <= ages[0] {
		t.Errorf("lower-bound picture age %v does not grow", ages)
	}
	p.meta.Store(true)
	p.state.Store(int32(display.StateLive))
	must(b.WaitState("LIVE", 3*time.Second))

	// Status stops after LIVE: the page itself must say STATE UNKNOWN, first
	// because the LIVE status is late (console.StatusLateAfterMs of its
	// period, 100 ms at 30 fps), then because the channel is silent (500 ms).
	lateMs := console.StatusLateAfterMs(1000.0 / 30)
	p.meta.Store(false)
	var late struct{ Reason, Banner string }
	must(b.WaitFunc(func() (bool, string, error) {
		err := b.Eval(`({Reason: document.body.dataset.reason,
			Banner: document.getElementById("banner").innerText.replace(/\s+/g, " ").trim()})`, &late)
		return late.Reason == console.ReasonStatusLate, fmt.Sprintf("%+v", late), err
	}, "reason status-late", 3*time.Second))
	if !regexp.MustCompile(`^STATE UNKNOWN — no status for \d+ ms after a live frame; treat the picture as unknown$`).MatchString(late.Banner) {
		t.Errorf("status-late banner %q", late.Banner)
	}
	must(b.WaitAttr("data-reason", console.ReasonMetaSilent, 3*time.Second))
	if st, _ := b.State(); st != "UNKNOWN" {
		t.Errorf("state %s with reason meta-silent", st)
	}
	log, _ = b.StateLog()
	// on the page's own clock: not before the limits, and promptly after
	// (the page looks again at a LIVE status's limit and runs its watchdog
	// every 50 ms; 100 ms and 1 s of room for a loaded CI)
	var lastMetaMs float64
	must(b.Eval("window.__console.lastMetaMs", &lastMetaMs))
	when := map[string]float64{}
	for _, e := range log {
		if e.State == "UNKNOWN" && e.TMs >= lastMetaMs {
			if _, ok := when[e.Reason]; !ok {
				when[e.Reason] = e.TMs - lastMetaMs
			}
		}
	}
	for _, w := range []struct {
		reason   string
		from, to float64
	}{{console.ReasonStatusLate, lateMs, lateMs + 100}, {console.ReasonMetaSilent, console.MetaSilenceMs, console.MetaSilenceMs + 1000}} {
		d, ok := when[w.reason]
		switch {
		case !ok:
			t.Errorf("no %s in the state log after the last status message (%+v)", w.reason, log)
		case d < w.from || d > w.to:
			t.Errorf("STATE UNKNOWN (%s) shown %.0f ms after the last status message, want %.0f..%.0f", w.reason, d, w.from, w.to)
		default:
			t.Logf("STATE UNKNOWN (%s) shown %.0f ms after the last status message", w.reason, d)
		}
	}
	banner, _ = b.BannerText()
	if !regexp.MustCompile(`^STATE UNKNOWN — no status from the relay for \d+ ms; treat the picture as unknown$`).MatchString(banner) {
		t.Errorf("STATE UNKNOWN banner %q", banner)
	}
	must(b.CheckCautionVisible())
	time.Sleep(200 * time.Millisecond)
	shot("console-unknown.png")

	// Back to LIVE, then freeze only the picture while status keeps coming:
	// STATE UNKNOWN again.
	p.meta.Store(true)
	must(b.WaitState("LIVE", 3*time.Second))
	p.video.Store(false)
	must(b.WaitAttr("data-reason", "video-frozen", 3*time.Second))
	if st, _ := b.State(); st != "UNKNOWN" {
		t.Errorf("state %s with reason video-frozen", st)
	}
	banner, _ = b.BannerText()
	if !regexp.MustCompile(`^STATE UNKNOWN — the picture stopped changing \d+ ms ago; treat it as unknown$`).MatchString(banner) {
		t.Errorf("frozen banner %q", banner)
	}
	p.video.Store(true)
	p.wantKey.Store(true)
	must(b.WaitState("LIVE", 5*time.Second))

	// Cutoff control: bounded by the administrator's limits.
	var bounds struct{ RMin, RMax, NMin, NMax, Profile string }
	must(b.Eval(`({RMin: document.getElementById("cutoff-range").min, RMax: document.getElementById("cutoff-range").max,
		NMin: document.getElementById("cutoff-number").min, NMax: document.getElementById("cutoff-number").max,
		Profile: document.getElementById("profile").value})`, &bounds))
	if bounds.RMin != "0.3" || bounds.RMax != "0.9" || bounds.NMin != "0.3" || bounds.NMax != "0.9" || bounds.Profile != "city" {
		t.Errorf("control bounds %+v, want 0.3..0.9 and profile city", bounds)
	}
	setAndApply := func(v string) {
		t.Helper()
		must(b.Eval(`(() => { const n = document.getElementById("cutoff-number"); n.value = `+"`"+v+"`"+`;
			n.dispatchEvent(new Event("input")); document.getElementById("cutoff-apply").click(); })()`, nil))
	}
	setAndApply("0.95")
	must(b.WaitFunc(func() (bool, string, error) {
		v, err := b.Attr("data-cutoff-error")
		return strings.Contains(v, "above the administrator's maximum 0.90"), v, err
	}, "page refuses 0.95", 3*time.Second))
	if c.Cutoff() != 0.6 {
		t.Errorf("cutoff changed to %v by an out-of-limits request", c.Cutoff())
	}
	// the server refuses too, whatever the page does
	var status struct {
		Code int
		Body string
	}
	must(b.Eval(`(async () => { const r = await fetch("/api/cutoff", {method: "POST",
		headers: {"Content-Type": "application/json", "Authorization": "Bearer " + sessionStorage.getItem("stopgap.token")},
		body: JSON.stringify({cutoff: 0.1})}); return {Code: r.status, Body: await r.text()}; })()`, &status))
	if status.Code != 400 || !strings.Contains(status.Body, "outside the administrator's limits [0.3, 0.9]") {
		t.Errorf("server answer to cutoff 0.1: %d %s", status.Code, status.Body)
	}
	setAndApply("0.75")
	must(b.WaitAttr("data-cutoff", "0.75", 3*time.Second))
	if c.Cutoff() != 0.75 || c.Profile() != "city" {
		t.Errorf("after Apply 0.75: %v %q", c.Cutoff(), c.Profile())
	}
	changesMu.Lock()
	if len(changes) != 1 || changes[0] != (console.Profile{Name: "city", Cutoff: 0.75}) {
		t.Errorf("OnCutoffChange calls %v", changes)
	}
	changesMu.Unlock()
	// the meta messages now carry the new cutoff and the page shows it
	must(b.WaitFunc(func() (bool, string, error) {
		var s string
		err := b.Eval(`document.getElementById("v-cutoff").textContent`, &s)
		return s == "0.75", s, err
	}, "cutoff 0.75 shown from meta", 3*time.Second))
	shot("console-cutoff.png")

	if n := p.errs.Load(); n != 0 {
		t.Errorf("%d WriteFrame/WriteMeta errors", n)
	}
	st := c.Stats()
	t.Logf("egress stats: %+v", st)
	if st.Viewers != 1 || st.FramesSent == 0 || st.MetaSent == 0 {
		t.Errorf("stats %+v", st)
	}
	if errs := pageErrors(b.ConsoleLog()); len(errs) > 0 {
		t.Errorf("page errors: %v", errs)
	}
}

// checkStatusLate: the page computes a LIVE status's limit as
// console.StatusLateAfterMs does; status messages every 2 ticks (67 ms: a
// lost frame or a lost message) do not flicker the banner, but for gaps
// that the machine's load made longer than the limit; and every 4 ticks
// (133 ms, past the 100 ms limit at 30 fps) they do, at every gap. It
// leaves the pump sending every tick, LIVE.
func checkStatusLate(t *testing.T, b *consoletest.Browser, p *pump) {
	t.Helper()
	for _, c := range []struct {
		js     string  // period_ms as the page may get it
		period float64 // as Go has it (null or a string: not given, 0)
	}{
		{"0", 0}, {"-1", -1}, {"1000/240", 1000.0 / 240}, {"1000/60", 1000.0 / 60}, {"1000/30", 1000.0 / 30}, {"40", 40},
		{"1000/15", 1000.0 / 15}, {"100", 100}, {"200", 200}, {"1e12", 1e12}, {"null", 0}, {`"33"`, 0},
	} {
		var page float64
		if err := b.Eval("window.__console.statusLateAfterMs("+c.js+")", &page); err != nil {
			t.Fatal(err)
		}
		if want := console.StatusLateAfterMs(c.period); math.Abs(page-want) > 1e-9 {
			t.Errorf("page: a LIVE status with period_ms %s stays good %v ms, console.StatusLateAfterMs says %v", c.js, page, want)
		}
	}

	// Status every `every` ticks for d: how many times the page showed
	// status-late, and the gaps between status messages as they reached
	// the page (the machine's load lengthens some).
	limit := console.StatusLateAfterMs(1000.0 / 30)
	lateIn := func(every int32, d time.Duration) (flickers int, gaps []float64) {
		t.Helper()
		if err := b.WaitState("LIVE", 5*time.Second); err != nil {
			t.Fatal(err)
		}
		var fromMs, toMs float64
		if err := b.Eval("performance.now()", &fromMs); err != nil {
			t.Fatal(err)
		}
		p.metaEvery.Store(every)
		time.Sleep(d)
		if err := b.Eval("performance.now()", &toMs); err != nil {
			t.Fatal(err)
		}
		p.metaEvery.Store(1)
		time.Sleep(300 * time.Millisecond) // the gap that ends after toMs
		var times []float64
		log, err := b.StateLog()
		if err == nil {
			err = b.Eval("window.__console.metaTimes", &times)
		}
		if err != nil {
			t.Fatal(err)
		}
		// a flicker at t belongs to the gap from t - limit on
		for _, e := range log {
			if e.Reason == console.ReasonStatusLate && e.TMs >= fromMs && e.TMs <= toMs {
				flickers++
			}
		}
		for k := 1; k < len(times); k++ {
			if a := times[k-1]; a >= fromMs-limit && a <= toMs {
				gaps = append(gaps, times[k]-a)
			}
		}
		return flickers, gaps
	}
	over := func(gaps []float64) (n int) {
		for _, g := range gaps {
			if g > limit {
				n++
			}
		}
		return n
	}
	median := func(gaps []float64) float64 {
		s := slices.Sorted(slices.Values(gaps))
		if len(s) == 0 {
			return math.NaN()
		}
		return s[len(s)/2]
	}
	// 2 ticks: 67 ms between status messages, a third under the limit. The
	// page may show status-late only for a gap that really exceeded the
	// limit as the messages reached it (the machine's doing, counted).
	n2, g2 := lateIn(2, 3*time.Second)
	t.Logf("status every 2 ticks for 3 s: %d gaps, median %.0f ms, %d over the %.0f ms limit; status-late shown %d times",
		len(g2), median(g2), over(g2), limit, n2)
	if m := median(g2); !(m > 55 && m < 80) {
		t.Errorf("status every 2 ticks: median gap %.0f ms at the page, want about 67", m)
	}
	if n2 > over(g2) {
		t.Errorf("status every 2 ticks (67 ms): the banner flickered to STATE UNKNOWN (status-late) %d times, "+
			"but only %d gaps were longer than %.0f ms", n2, over(g2), limit)
	}
	// 4 ticks: 133 ms, a third over: every such gap shows status-late.
	n4, g4 := lateIn(4, 2*time.Second)
	t.Logf("status every 4 ticks for 2 s: %d gaps, median %.0f ms, %d over the limit; status-late shown %d times",
		len(g4), median(g4), over(g4), n4)
	if over(g4) < 10 || n4 < over(g4)-1 {
		t.Errorf("status every 4 ticks (133 ms) for 2 s: status-late shown %d times for %d gaps over %.0f ms, want one per gap (about 15)",
			n4, over(g4), limit)
	}
	if err := b.WaitState("LIVE", 5*time.Second); err != nil {
		t.Fatal(err)
	}
}

func pageErrors(lines []string) []string {
	var out []string
	for _, l := range lines {
		if strings.HasPrefix(l, "exception") || strings.HasPrefix(l, "console.error") {
			out = append(out, l)
		}
	}
	return out
}
