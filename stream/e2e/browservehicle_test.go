package e2e

import (
	"bufio"
	"context"
	"fmt"
	"io"
	"net"
	"net/http"
	"net/url"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"syscall"
	"testing"
	"time"

	"gocv.io/x/gocv"

	"stopgap/stream/console/consoletest"
	"stopgap/stream/recording"
	"stopgap/stream/relay"
	"stopgap/stream/whip"
)

// The browser-as-vehicle rig: Debian's Chromium, inside a network namespace
// of the test's own, publishes a simdrive drive (its fake camera reads it as
// Y4M) over WHIP to the relay in the test process, with telemetry on an
// unordered, unreliable data channel. The namespace reaches the host through
// a router namespace (see netns); the relay offers ICE candidates on the
// host's end only, on one UDP port, so iptables rules in the router on that
// port make loss and outages on the media path alone.

// vehiclePage is the browser vehicle. Query parameters: whip (endpoint),
// token, w and h (camera size), dur (seconds before it ends its session with
// DELETE), stats (if set, every change of the sender's own statistics is
// reported too). It reports progress and errors to /vehicle-log.
const vehiclePage = `<!doctype html><meta charset="utf-8"><title>vehicle</title>
<script>
const q = new URLSearchParams(location.search);
const log = (m) => fetch("/vehicle-log", {method: "POST", body: String(m)}).catch(() => {});
(async () => {
  try {
    const pc = new RTCPeerConnection();
    // Telemetry: unordered, no retransmissions (a late sample is worth nothing).
    const dc = pc.createDataChannel("telemetry", {ordered: false, maxRetransmits: 0});
    dc.onopen = () => {
      log("telemetry open");
      setInterval(() => {
        if (dc.readyState !== "open") return;
        const t = Math.round((performance.timeOrigin + performance.now()) * 1000);
        dc.send(JSON.stringify({t_us: t, speed_mps: 8, yaw_rate_rps: 0.02}));
      }, 20);
    };
    pc.onconnectionstatechange = () => log("pc " + pc.connectionState);
    const stream = await navigator.mediaDevices.getUserMedia(
      {video: {width: +q.get("w"), height: +q.get("h"), frameRate: 30}});
    const track = stream.getVideoTracks()[0];
    track.contentHint = "motion";
    const tr = pc.addTransceiver(track, {direction: "sendonly"});
    tr.setCodecPreferences(RTCRtpSender.getCapabilities("video").codecs.filter(c => c.mimeType === "video/VP8"));
    await pc.setLocalDescription(await pc.createOffer());
    await new Promise((done) => {
      if (pc.iceGatheringState === "complete") return done();
      pc.onicegatheringstatechange = () => { if (pc.iceGatheringState === "complete") done(); };
      setTimeout(done, 3000);
    });
    const resp = await fetch(q.get("whip"), {method: "POST",
      headers: {"Authorization": "Bearer " + q.get("token"), "Content-Type": "application/sdp"},
      body: pc.localDescription.sdp});
    const answer = await resp.text();
    if (resp.status !== 201) { log("whip status " + resp.status + ": " + answer); return; }
    const resource = new URL(resp.headers.get("Location"), q.get("whip")).href;
    await pc.setRemoteDescription({type: "answer", sdp: answer});
    try {
      // Keep the camera's size: the relay's camera model is for it.
      const p = tr.sender.getParameters();
      p.degradationPreference = "maintain-resolution";
      await tr.sender.setParameters(p);
    } catch (e) { log("degradationPreference: " + e); }
    if (q.get("stats")) {
      let last = "";
      setInterval(async () => {
        const rep = await pc.getStats();
        let o = null, cp = null;
        rep.forEach((s) => { if (s.type === "outbound-rtp" && s.kind === "video") o = s; if (s.type === "candidate-pair" && s.nominated) cp = s; });
        if (!o) return;
        const k = [o.framesEncoded, o.keyFramesEncoded, o.framesSent, o.pliCount, o.nackCount].join(",");
        if (k === last) return;
        last = k;
        log("sender frames_encoded=" + o.framesEncoded + " keyframes_encoded=" + o.keyFramesEncoded + " frames_sent=" + o.framesSent +
          " packets_sent=" + o.packetsSent + " plis=" + o.pliCount + " nacks=" + o.nackCount + " target_bps=" + o.targetBitrate +
          " available_out_bps=" + (cp && cp.availableOutgoingBitrate) + " send_delay_s=" + (o.totalPacketSendDelay || 0).toFixed(3));
      }, 5);
    }
    setTimeout(async () => {
      await fetch(resource, {method: "DELETE", headers: {"Authorization": "Bearer " + q.get("token")}}).catch(() => {});
      pc.close();
      log("done");
    }, 1000 * +q.get("dur"));
  } catch (e) { log("error " + e); }
})();
</script>`

// requireBrowserVehicle skips t unless it can build the rig: root, ip,
// iptables and chromium.
func requireBrowserVehicle(t *testing.T) string {
	t.Helper()
	exe := consoletest.RequireChromium(t)
	if os.Geteuid() != 0 {
		t.Skip("browser-vehicle test: needs root to create a network namespace (ip netns) and iptables rules; skipping")
	}
	for _, tool := range []string{"ip", "iptables"} {
		if _, err := exec.LookPath(tool); err != nil {
			t.Skipf("browser-vehicle test: %s not found (apt-get install iproute2 iptables, as ./dev.sh deps does); skipping", tool)
		}
	}
	return exe
}

// netns is the browser's network: two namespaces of the test's own, the
// browser's (name) and a router (router) between it and the host:
//
//	host hostIf hostIP/30 <-> router (forwards) <-> browser nsIP/30
//
// Loss and outages are iptables rules in the router's FORWARD chain: packets
// dropped there are lost on the way, as on a real link (a DROP in the
// browser's own OUTPUT chain would fail its send call instead, which the
// sender sees and works around).
type netns struct {
	t                      *testing.T
	name, router, hostIf   string
	browserSide            string // the router's end of the link to the browser
	hostSide               string // the router's end of the link to the host
	hostIP, routerIP, nsIP string
	mu                     sync.Mutex
	rules                  [][]string // iptables rules in place, to delete
}

func run(args ...string) error {
	out, err := exec.Command(args[0], args[1:]...).CombinedOutput()
	if err != nil {
		return fmt.Errorf("%s: %w: %s", strings.Join(args, " "), err, strings.TrimSpace(string(out)))
	}
	return nil
}

// netnsSeq numbers the test networks of this process: the kernel removes a
// deleted namespace's links after the delete returns, so a second test of
// the same run that took the same names found them still there ("File
// exists") and was skipped.
var netnsSeq atomic.Int32

// newNetns creates both namespaces and their links; t.Cleanup deletes them
// (the veth pairs, and the host's route through hostIf, go with them).
func newNetns(t *testing.T) *netns {
	t.Helper()
	// Names and the /30 subnets differ by process and, for up to ten
	// networks, within one.
	id := (os.Getpid()*10 + int(netnsSeq.Add(1)-1)%10) % 100000
	sub := fmt.Sprintf("10.213.%d.", id%250)
	n := &netns{t: t, name: fmt.Sprintf("sgv%d", id), router: fmt.Sprintf("sgr%d", id), hostIf: fmt.Sprintf("sgh%d", id),
		hostIP: sub + "1", routerIP: sub + "2", nsIP: sub + "6", browserSide: fmt.Sprintf("sgc%d", id),
		hostSide: fmt.Sprintf("sgb%d", id)}
	rb, rv := n.hostSide, n.browserSide // router's ends: to the host, to the browser
	bn := fmt.Sprintf("sgn%d", id)      // browser's end
	if err := run("ip", "netns", "add", n.router); err != nil {
		t.Skipf("browser-vehicle test: cannot create a network namespace: %v", err)
	}
	t.Cleanup(func() {
		for _, ns := range []string{n.name, n.router} {
			if err := run("ip", "netns", "del", ns); err != nil {
				t.Errorf("deleting namespace %s: %v", ns, err)
			}
		}
	})
	if err := run("ip", "netns", "add", n.name); err != nil {
		t.Skipf("browser-vehicle test: cannot create a network namespace: %v", err)
	}
	inR := func(args ...string) []string { return append([]string{"ip", "netns", "exec", n.router}, args...) }
	inB := func(args ...string) []string { return append([]string{"ip", "netns", "exec", n.name}, args...) }
	for _, c := range [][]string{
		{"ip", "link", "add", n.hostIf, "type", "veth", "peer", "name", rb, "netns", n.router},
		// No IPv6 on the host's end: its link-local address stays
		// "tentative" (duplicate address detection) for a second or two,
		// and the relay's ICE port cannot be bound on it meanwhile.
		{"sysctl", "-q", "-w", "net.ipv6.conf." + n.hostIf + ".disable_ipv6=1"},
		{"ip", "addr", "add", n.hostIP + "/30", "dev", n.hostIf},
		{"ip", "link", "set", n.hostIf, "up"},
		inR("ip", "addr", "add", n.routerIP+"/30", "dev", rb),
		inR("ip", "link", "set", rb, "up"),
		inR("ip", "link", "set", "lo", "up"),
		inR("ip", "link", "add", rv, "type", "veth", "peer", "name", bn, "netns", n.name),
		inR("ip", "addr", "add", sub+"5/30", "dev", rv),
		inR("ip", "link", "set", rv, "up"),
		inR("sysctl", "-q", "-w", "net.ipv4.ip_forward=1"),
		// IPv4 only, so the iptables rules see every media packet (the
		// browser would otherwise prefer IPv6 link-local pairs).
		inR("sysctl", "-q", "-w", "net.ipv6.conf.all.disable_ipv6=1"),
		inB("sysctl", "-q", "-w", "net.ipv6.conf.all.disable_ipv6=1"),
		inB("ip", "addr", "add", n.nsIP+"/30", "dev", bn),
		inB("ip", "link", "set", bn, "up"),
		inB("ip", "link", "set", "lo", "up"),
		inB("ip", "route", "add", "default", "via", sub+"5"),
		{"ip", "route", "add", sub + "4/30", "via", n.routerIP, "dev", n.hostIf},
	} {
		if err := run(c...); err != nil {
			// The machine does not let us build the network (no network
			// administration rights in this container, say): not a fault
			// of the code under test.
			t.Skipf("browser-vehicle test: cannot set up the test network: %v", err)
		}
	}
	return n
}

// addRule inserts an iptables rule in the router.
func (n *netns) addRule(rule ...string) {
	n.t.Helper()
	if err := run(append([]string{"ip", "netns", "exec", n.router, "iptables", "-I"}, rule...)...); err != nil {
		n.t.Fatal(err)
	}
	n.mu.Lock()
	n.rules = append(n.rules, rule)
	n.mu.Unlock()
}

// clearRules deletes every rule added.
func (n *netns) clearRules() {
	n.t.Helper()
	n.mu.Lock()
	rules := n.rules
	n.rules = nil
	n.mu.Unlock()
	for _, r := range rules {
		if err := run(append([]string{"ip", "netns", "exec", n.router, "iptables", "-D"}, r...)...); err != nil {
			n.t.Error(err)
		}
	}
}

// randomLoss drops a share p of the media packets the browser sends.
func (n *netns) randomLoss(port int, p float64) {
	n.addRule("FORWARD", "-p", "udp", "--dport", strconv.Itoa(port), "-m", "statistic", "--mode", "random",
		"--probability", strconv.FormatFloat(p, 'f', 4, 64), "-j", "DROP")
}

// countSent inserts a rule without target on top of FORWARD that counts the
// packets sent to port (before any DROP rule sees them).
func (n *netns) countSent(port int) {
	n.addRule("FORWARD", "-p", "udp", "--dport", strconv.Itoa(port))
}

// forwardCounters returns the packet counters of the router's FORWARD rules:
// sent (the rule without target) and dropped (DROP rules).
func (n *netns) forwardCounters() (sent, dropped uint64) {
	n.t.Helper()
	out, err := exec.Command("ip", "netns", "exec", n.router, "iptables", "-L", "FORWARD", "-v", "-n", "-x").CombinedOutput()
	if err != nil {
		n.t.Fatalf("iptables -L: %v: %s", err, out)
	}
	for _, l := range strings.Split(string(out), "\n")[2:] {
		f := strings.Fields(l)
		if len(f) < 3 {
			continue
		}
		v, err := strconv.ParseUint(f[0], 10, 64)
		if err != nil {
			continue
		}
		switch {
		case f[2] == "DROP":
			dropped += v
		case f[2] == "udp" || f[2] == "17":
			sent += v // no target: the counting rule
		}
	}
	return sent, dropped
}

// capture writes the UDP packets on both sides of the router to
// dir/host.pcap (what reaches the relay's side, after the rules) and
// dir/browser.pcap (what the browser sent, before them), with the kernel's
// timestamps, when tcpdump is installed: the way to see, packet by packet,
// what a sender did around an outage (STOPGAP_E2E_PCAP=dir). Media stays
// encrypted (SRTP); RTP and RTCP headers are readable.
func (n *netns) capture(dir string) {
	n.t.Helper()
	if _, err := exec.LookPath("tcpdump"); err != nil {
		n.t.Logf("STOPGAP_E2E_PCAP: tcpdump not found; no capture")
		return
	}
	for _, c := range [][]string{
		{"tcpdump", "-q", "-i", n.hostIf, "-w", filepath.Join(dir, "host.pcap"), "udp"},
		{"ip", "netns", "exec", n.router, "tcpdump", "-q", "-i", n.browserSide, "-w", filepath.Join(dir, "browser.pcap"), "udp"},
	} {
		cmd := exec.Command(c[0], c[1:]...)
		if err := cmd.Start(); err != nil {
			n.t.Fatalf("STOPGAP_E2E_PCAP: %v", err)
		}
		n.t.Cleanup(func() { cmd.Process.Signal(os.Interrupt); cmd.Wait() })
	}
}

// cut drops every packet to and from the relay's media port. It is one rule
// (multiport --ports matches the source or the destination port), so the
// link returns in both directions at the same instant, as a real one does:
// with one rule per direction, deleted one after the other, the relay's
// first keyframe request after the outage could be dropped by the rule
// still in place (measured: 30 ms between the two deletions on a loaded
// host, and the request lost), which is a fault of the test, not of the
// link it models.
func (n *netns) cut(port int) {
	n.addRule("FORWARD", "-p", "udp", "-m", "multiport", "--ports", strconv.Itoa(port), "-j", "DROP")
}

// limitUplink limits what the router forwards from the browser to the host
// to kbit kbit/s, with a queue of at most 300 ms (a token bucket, tbf, on
// the router's end of the link to the host): a slow uplink with a deep
// buffer, as cellular links have. It stays until the namespace is deleted.
func (n *netns) limitUplink(kbit int) {
	n.t.Helper()
	if err := run("ip", "netns", "exec", n.router, "tc", "qdisc", "add", "dev", n.hostSide, "root", "tbf",
		"rate", strconv.Itoa(kbit)+"kbit", "burst", "16kb", "latency", "300ms"); err != nil {
		n.t.Skipf("browser-vehicle test: cannot limit the link (tc with the tbf queueing discipline): %v", err)
	}
}

// writeY4M writes the drive's frames as a 4:2:0 Y4M file for Chromium's fake
// camera.
func writeY4M(t *testing.T, rec *recording.Recording, path string) {
	t.Helper()
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	w := bufio.NewWriter(f)
	fmt.Fprintf(w, "YUV4MPEG2 W%d H%d F30:1 Ip A1:1 C420jpeg\n", rec.Camera.Width, rec.Camera.Height)
	yuv := gocv.NewMat()
	defer yuv.Close()
	for _, fr := range rec.Frames {
		img := gocv.IMRead(filepath.Join(rec.Dir, filepath.FromSlash(fr.File)), gocv.IMReadColor)
		if img.Empty() {
			t.Fatalf("frame %d (%s) unreadable", fr.Index, fr.File)
		}
		gocv.CvtColor(img, &yuv, gocv.ColorBGRToYUVI420)
		img.Close()
		w.WriteString("FRAME\n")
		w.Write(yuv.ToBytes())
	}
	if err := w.Flush(); err != nil {
		t.Fatal(err)
	}
}

// senderStartKbps is whip.Config.SenderStartKbps for the browser rig from
// STOPGAP_E2E_START_KBPS (unset: the default; -1: the browser's own start),
// to compare sessions with and without a start bitrate in the answer.
func senderStartKbps(t *testing.T) int {
	v := os.Getenv("STOPGAP_E2E_START_KBPS")
	if v == "" {
		return 0
	}
	k, err := strconv.Atoi(v)
	if err != nil {
		t.Fatalf("STOPGAP_E2E_START_KBPS=%q: want kbit/s, or -1 for the browser's own start", v)
	}
	t.Logf("sender start bitrate in the answer: %d kbit/s (-1: the browser's own)", k)
	return k
}

// browserRig is the relay on the host end of the veth pair and the page
// server; sessions are Chromium processes inside the namespace.
type browserRig struct {
	t       *testing.T
	exe     string
	ns      *netns
	relay   *relay.Relay
	base    string // http://hostIP:port
	udpPort int
	y4m     string
	w, h    int
	// recordDir is the relay's recording with STOPGAP_E2E_RECORD=1, else "".
	recordDir string
	// stopRelay stops the relay, which closes its recording; the rig's
	// cleanup calls it too (only the first call acts).
	stopRelay func()

	mu   sync.Mutex
	logs []string
}

func startBrowserRig(t *testing.T, w, h int, driveS float64) *browserRig {
	t.Helper()
	exe := requireBrowserVehicle(t)
	ns := newNetns(t)
	dir := t.TempDir()
	rec, err := recording.Open(renderDrive(t, dir, w, h, driveS))
	if err != nil {
		t.Fatal(err)
	}
	r := &browserRig{t: t, exe: exe, ns: ns, w: w, h: h, y4m: filepath.Join(dir, "drive.y4m")}
	if d := os.Getenv("STOPGAP_E2E_PCAP"); d != "" {
		ns.capture(d)
	}
	writeY4M(t, rec, r.y4m)
	pc, err := net.ListenPacket("udp4", ns.hostIP+":0")
	if err != nil {
		t.Fatal(err)
	}
	r.udpPort = pc.LocalAddr().(*net.UDPAddr).Port
	pc.Close()
	if os.Getenv("STOPGAP_E2E_RECORD") == "1" {
		r.recordDir = filepath.Join(dir, "relay-recording")
	}
	r.relay, err = relay.New(relay.Config{
		FPS: 30, Camera: rec.Camera, RecordDir: r.recordDir,
		IngestToken: ingestToken, ConsoleToken: consoleToken, Logger: quietLogger(),
		Whip: whip.Config{Network: whip.Network{Interfaces: []string{ns.hostIf}, UDPPort: r.udpPort},
			SenderStartKbps: senderStartKbps(t)},
	})
	if err != nil {
		t.Fatal(err)
	}
	ln, err := net.Listen("tcp", ns.hostIP+":0")
	if err != nil {
		t.Fatal(err)
	}
	mux := http.NewServeMux()
	mux.Handle("/", r.relay.Handler())
	mux.HandleFunc("/vehicle.html", func(w http.ResponseWriter, _ *http.Request) {
		w.Header().Set("Content-Type", "text/html; charset=utf-8")
		io.WriteString(w, vehiclePage)
	})
	mux.HandleFunc("/vehicle-log", func(w http.ResponseWriter, req *http.Request) {
		b, _ := io.ReadAll(io.LimitReader(req.Body, 2048))
		r.mu.Lock()
		r.logs = append(r.logs, time.Now().Format("15:04:05.000")+" "+string(b))
		r.mu.Unlock()
	})
	srv := &http.Server{Handler: mux, ReadHeaderTimeout: 5 * time.Second}
	go srv.Serve(ln)
	r.base = "http://" + ln.Addr().String()
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- r.relay.Run(ctx) }()
	var stopOnce sync.Once
	r.stopRelay = func() {
		stopOnce.Do(func() {
			cancel()
			if err := <-done; err != nil {
				t.Errorf("relay: %v", err)
			}
		})
	}
	t.Cleanup(func() {
		r.stopRelay()
		srv.Close()
		if t.Failed() || os.Getenv("STOPGAP_E2E_VEHICLE_STATS") != "" {
			r.mu.Lock()
			for _, l := range r.logs {
				t.Log("vehicle page:", l)
			}
			r.mu.Unlock()
		}
	})
	return r
}

// session runs one browser session of durS seconds; it returns when the
// browser process was started. stop ends it (by PID) and waits.
func (r *browserRig) session(durS float64) (stop func()) {
	r.t.Helper()
	page := fmt.Sprintf("%s/vehicle.html?whip=%s&token=%s&w=%d&h=%d&dur=%g", r.base,
		url.QueryEscape(r.base+"/whip"), url.QueryEscape(ingestToken), r.w, r.h, durS)
	if os.Getenv("STOPGAP_E2E_VEHICLE_STATS") != "" {
		page += "&stats=1"
	}
	userDir := r.t.TempDir()
	args := []string{"netns", "exec", r.ns.name, r.exe,
		"--headless", "--no-sandbox", "--disable-gpu", "--no-first-run", "--no-default-browser-check",
		"--disable-background-networking", "--disable-component-update", "--disable-sync", "--disable-extensions",
		"--mute-audio", "--disable-background-timer-throttling", "--disable-renderer-backgrounding",
		"--use-fake-device-for-media-stream", "--use-fake-ui-for-media-stream",
		"--use-file-for-fake-video-capture=" + r.y4m,
		"--unsafely-treat-insecure-origin-as-secure=" + r.base,
		"--user-data-dir=" + userDir, page}
	cmd := exec.Command("ip", args...)
	cmd.SysProcAttr = &syscall.SysProcAttr{Setpgid: true}
	if err := cmd.Start(); err != nil {
		r.t.Fatalf("starting chromium: %v", err)
	}
	pgid := cmd.Process.Pid
	var once sync.Once
	stop = func() {
		once.Do(func() {
			_ = syscall.Kill(-pgid, syscall.SIGKILL) // the browser's own process group
			_ = cmd.Wait()
		})
	}
	r.t.Cleanup(stop)
	return stop
}

// ticks returns live and total ticks between two relay snapshots.
func ticks(a, b relay.Stats) (live, total uint64) {
	live = b.TicksLive - a.TicksLive
	return live, live + (b.TicksPredicted - a.TicksPredicted) + (b.TicksStale - a.TicksStale)
}

func share(live, total uint64) float64 { return float64(live) / float64(max(total, 1)) }

// waitSession waits until the relay serves a session that has shown a tick.
func (r *browserRig) waitSession(before relay.Stats, timeout time.Duration) relay.Stats {
	r.t.Helper()
	var st relay.Stats
	waitFor(r.t, "the browser's session to show ticks", timeout, func() bool {
		st = r.relay.Stats()
		_, n := ticks(before, st)
		return st.Sessions > before.Sessions && n > 0
	})
	return st
}

// waitIdle waits until the relay serves no session.
func (r *browserRig) waitIdle(timeout time.Duration) {
	r.t.Helper()
	waitFor(r.t, "the browser's session to end", timeout, func() bool { return !r.relay.Stats().Active })
}

// TestBrowserVehicle is the short version: one 6 s session of Chromium as
// the vehicle on a clean link. It checks that the browser's session works
// end to end (LIVE ticks, telemetry through the unordered channel) and logs
// the share of LIVE ticks; the figures with thresholds are in
// TestAcceptBrowserVehicle.
func TestBrowserVehicle(t *testing.T) {
	if testing.Short() {
		t.Skip("browser-vehicle run of about 15 s")
	}
	r := startBrowserRig(t, 320, 180, 4)
	s0 := r.relay.Stats()
	stop := r.session(6)
	defer stop()
	s1 := r.waitSession(s0, 20*time.Second)
	time.Sleep(4 * time.Second)
	s2 := r.relay.Stats()
	live, total := ticks(s1, s2)
	t.Logf("clean link, 4 s of a browser session: %d of %d ticks LIVE (%.1f%%); telemetry in %d; repair %+v",
		live, total, 100*share(live, total), s2.TelemetryIn-s0.TelemetryIn, s2.Repair)
	if live == 0 || s2.TelemetryIn == s0.TelemetryIn {
		t.Errorf("no LIVE tick or no telemetry from the browser: %+v", s2)
	}
	r.waitIdle(15 * time.Second)
}

// TestAcceptBrowserVehicle measures the figures with Chromium as the
// vehicle (set STOPGAP_ACCEPT=1; about 2 minutes): the share of LIVE ticks on
// a clean link over three sessions and in each session's first 5 s; with 5%
// random loss on the media (NACK repairs and keyframe requests reported);
// and the first LIVE tick after a 3 s outage. Thresholds are the issue's:
// clean >= 99.5%, first 5 s >= 90%, 5% loss >= 90%, LIVE within 150 ms of
// the link returning and no LIVE tick while it is cut (after the frames in
// flight, 150 ms). With STOPGAP_E2E_RECORD=1 the relay records the whole
// run, and at the end its recording is replayed (checkReplayAgreement): the
// replay's states must be the relay's on the ticks of every session (its
// thresholds).
func TestAcceptBrowserVehicle(t *testing.T) {
	requireAccept(t)
	w, h := 640, 360
	if v := os.Getenv("STOPGAP_ACCEPT_SIZE"); v != "" {
		fmt.Sscanf(v, "%dx%d", &w, &h)
	}
	r := startBrowserRig(t, w, h, 6)

	t.Run("clean", func(t *testing.T) {
		var allLive, allTotal uint64
		for i := 0; i < 3; i++ {
			s0 := r.relay.Stats()
			stop := r.session(14)
			r.waitSession(s0, 20*time.Second)
			time.Sleep(5 * time.Second)
			s5 := r.relay.Stats()
			time.Sleep(7 * time.Second)
			s12 := r.relay.Stats()
			fl, ft := ticks(s0, s5)
			live, total := ticks(s5, s12)
			allLive, allTotal = allLive+live, allTotal+total
			t.Logf("session %d: first 5 s %d of %d LIVE (%.1f%%); then %d of %d LIVE (%.2f%%); late frames %d, frames moved on %d, keyframe requests %d",
				i+1, fl, ft, 100*share(fl, ft), live, total, 100*share(live, total),
				s12.LateFrames-s0.LateFrames, s12.FramesMovedOn-s0.FramesMovedOn, s12.KeyframeRequests-s0.KeyframeRequests)
			if share(fl, ft) < 0.90 {
				t.Errorf("session %d: first 5 s %.1f%% LIVE < 90%%", i+1, 100*share(fl, ft))
			}
			r.waitIdle(20 * time.Second)
			stop()
		}
		t.Logf("clean link, 3 sessions after their first 5 s: %d of %d ticks LIVE (%.2f%%)", allLive, allTotal, 100*share(allLive, allTotal))
		if share(allLive, allTotal) < 0.995 {
			t.Errorf("clean link %.2f%% LIVE < 99.5%%", 100*share(allLive, allTotal))
		}
	})

	t.Run("loss 5%", func(t *testing.T) {
		s0 := r.relay.Stats()
		stop := r.session(16)
		defer stop()
		r.waitSession(s0, 20*time.Second)
		time.Sleep(3 * time.Second)
		r.ns.randomLoss(r.udpPort, 0.05)
		r.ns.countSent(r.udpPort)
		s1 := r.relay.Stats()
		time.Sleep(10 * time.Second)
		s2 := r.relay.Stats()
		sent, dropped := r.ns.forwardCounters()
		r.ns.clearRules()
		live, total := ticks(s1, s2)
		t.Logf("5%% random loss on the media for 10 s: %d of %d packets to the relay's port dropped (%.1f%%)", dropped, sent, 100*share(dropped, sent))
		t.Logf("5%% random loss on the media for 10 s: %d of %d ticks LIVE (%.1f%%); NACKed %d, repaired %d, gave up %d; keyframe requests %d; frame losses %d; late frames %d",
			live, total, 100*share(live, total), s2.Repair.Gaps-s1.Repair.Gaps, s2.Repair.Repaired-s1.Repair.Repaired,
			s2.Repair.GaveUp-s1.Repair.GaveUp, s2.KeyframeRequests-s1.KeyframeRequests, s2.Losses-s1.Losses, s2.LateFrames-s1.LateFrames)
		t.Logf("relay during the loss: frames in %d, dropped by a full display queue %d",
			s2.FramesIn-s1.FramesIn, s2.FramesDropped-s1.FramesDropped)
		if share(live, total) < 0.90 {
			t.Errorf("5%% loss: %.1f%% LIVE < 90%%", 100*share(live, total))
		}
		r.waitIdle(20 * time.Second)
	})

	t.Run("outage 3 s", func(t *testing.T) {
		s0 := r.relay.Stats()
		stop := r.session(14)
		defer stop()
		r.waitSession(s0, 20*time.Second)
		time.Sleep(4 * time.Second)
		beforeCut := r.relay.Stats()
		r.ns.cut(r.udpPort)
		cutAt := time.Now()
		bl, bt := ticks(s0, beforeCut)
		t.Logf("link cut at %s; the session's ticks before it: %d of %d LIVE (%.1f%%)",
			cutAt.Format("15:04:05.000000"), bl, bt, 100*share(bl, bt))
		time.Sleep(150 * time.Millisecond)
		inCut := r.relay.Stats()
		time.Sleep(3*time.Second - time.Since(cutAt))
		endCut := r.relay.Stats()
		r.ns.clearRules()
		back := time.Now()
		t.Logf("link back at %s", back.Format("15:04:05.000000"))
		// Polled every millisecond: waitFor's 10 ms would add up to 10 ms to the figure.
		for r.relay.Stats().TicksLive == endCut.TicksLive {
			if time.Since(back) > 10*time.Second {
				t.Fatal("no LIVE tick within 10 s of the link's return")
			}
			time.Sleep(time.Millisecond)
		}
		first := time.Since(back)
		sb := r.relay.Stats()
		t.Logf("3 s outage: LIVE ticks while cut (after the first 150 ms): %d; first LIVE tick %v after the link returned; keyframe requests in the run %d; first frame after the outage shown late (frames_resumed) %d",
			endCut.TicksLive-inCut.TicksLive, first.Round(time.Millisecond), sb.KeyframeRequests-s0.KeyframeRequests, sb.FramesResumed-endCut.FramesResumed)
		if endCut.TicksLive != inCut.TicksLive {
			t.Errorf("%d LIVE ticks while the link was cut", endCut.TicksLive-inCut.TicksLive)
		}
		if first > 150*time.Millisecond {
			t.Errorf("first LIVE tick %v after the link returned, want <= 150 ms", first)
		}
		r.waitIdle(20 * time.Second)
	})

	if r.recordDir != "" {
		t.Run("replay agreement", func(t *testing.T) {
			cutoff := r.relay.Console().Cutoff()
			r.stopRelay() // closes the recording
			checkReplayAgreement(t, r.recordDir, cutoff, "e2e-browser-recording")
		})
	}
}

// TestAcceptBrowserWeakUplink shows what the sender's start bitrate
// (whip.Config.SenderStartKbps, STOPGAP_E2E_START_KBPS) costs on an uplink
// slower than it: Chromium publishes through a link limited to
// STOPGAP_E2E_UPLINK_KBIT kbit/s (default 1000) with a 300 ms queue from its
// first packet on (set STOPGAP_ACCEPT=1; about 25 s). It logs the share of
// LIVE ticks in the session's first 5 s and in the 5 s after, and the
// keyframe requests; with STOPGAP_E2E_VEHICLE_STATS=1 the browser's
// estimate and target over time. The session must settle: at least 90 % of
// the ticks LIVE in its second 5 s.
func TestAcceptBrowserWeakUplink(t *testing.T) {
	requireAccept(t)
	kbit := 1000
	if v := os.Getenv("STOPGAP_E2E_UPLINK_KBIT"); v != "" {
		var err error
		if kbit, err = strconv.Atoi(v); err != nil || kbit <= 0 {
			t.Fatalf("STOPGAP_E2E_UPLINK_KBIT=%q: want kbit/s", v)
		}
	}
	r := startBrowserRig(t, 640, 360, 6)
	r.ns.limitUplink(kbit)
	s0 := r.relay.Stats()
	stop := r.session(14)
	defer stop()
	r.waitSession(s0, 20*time.Second)
	time.Sleep(5 * time.Second)
	s5 := r.relay.Stats()
	time.Sleep(5 * time.Second)
	s10 := r.relay.Stats()
	fl, ft := ticks(s0, s5)
	nl, nt := ticks(s5, s10)
	t.Logf("uplink %d kbit/s: first 5 s %d of %d ticks LIVE (%.1f%%), keyframe requests %d; next 5 s %d of %d LIVE (%.1f%%), keyframe requests %d",
		kbit, fl, ft, 100*share(fl, ft), s5.KeyframeRequests-s0.KeyframeRequests, nl, nt, 100*share(nl, nt),
		s10.KeyframeRequests-s5.KeyframeRequests)
	if share(nl, nt) < 0.90 {
		t.Errorf("uplink %d kbit/s: %.1f%% LIVE in the session's second 5 s < 90%%: the sender did not settle below the link's rate", kbit, 100*share(nl, nt))
	}
	r.waitIdle(20 * time.Second)
}
