package e2e

import (
	"context"
	"errors"
	"io"
	"log/slog"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"sync"
	"testing"
	"time"

	"github.com/pion/rtp"

	"stopgap/bench/simdrive"
	"stopgap/stream/recording"
	"stopgap/stream/relay"
	"stopgap/stream/simvehicle"
	"stopgap/stream/whip"
)

const (
	ingestToken  = "e2e-ingest-token-0123456789abcdef"
	consoleToken = "e2e-console-token-0123456789abcdef"
)

// rigOptions configure a relay + vehicle run.
type rigOptions struct {
	width, height int
	driveS        float64
	record        bool // relay records into rig.recordDir
	link          simvehicle.LinkConfig
	cacheFrames   bool
	bitrateBps    int
	vehicleCPU    int
	// alwaysTranscode: every frame through the relay's encoder
	// (relay.Config.AlwaysTranscode); the default is pass-through.
	alwaysTranscode bool
	// keepWire keeps a copy of every packet the link lets through
	// (rig.wirePkts), to decode the vehicle's stream afterwards.
	keepWire bool
}

// wireEvent is one packet at the link's wire filter.
type wireEvent struct {
	at     time.Time
	kept   bool
	seq    uint16
	ts     uint32
	marker bool
}

// rig is a running relay and simulated vehicle.
type rig struct {
	t         testing.TB
	relay     *relay.Relay
	base      string
	veh       *simvehicle.Vehicle
	link      *simvehicle.Link
	rec       *recording.Recording
	recordDir string

	mu       sync.Mutex
	wire     []wireEvent
	wirePkts []rtp.Packet // with rigOptions.keepWire: packets kept by the link, in wire order
	plis     []time.Time  // keyframe requests as received by the vehicle
	frames   []simvehicle.FrameInfo

	stopVehicle context.CancelFunc
	vehDone     chan error
	stopRelay   context.CancelFunc
	relayDone   chan error
	srv         *http.Server
	stopped     bool
}

// renderDrive renders a small simulated drive into dir/drive.
func renderDrive(t testing.TB, dir string, w, h int, durS float64) string {
	t.Helper()
	drive := filepath.Join(dir, "drive")
	if err := simdrive.Generate(context.Background(), simdrive.Config{Width: w, Height: h, DurationS: durS}, drive, nil); err != nil {
		t.Fatalf("simdrive: %v", err)
	}
	return drive
}

func quietLogger() *slog.Logger {
	if os.Getenv("STOPGAP_E2E_LOG") == "debug" {
		return slog.New(slog.NewTextHandler(os.Stderr, &slog.HandlerOptions{Level: slog.LevelDebug}))
	}
	if os.Getenv("STOPGAP_E2E_LOG") != "" {
		return slog.New(slog.NewTextHandler(os.Stderr, &slog.HandlerOptions{Level: slog.LevelInfo}))
	}
	return slog.New(slog.NewTextHandler(io.Discard, nil))
}

// tapPublisher records keyframe requests on their way to the vehicle.
type tapPublisher struct {
	*whip.Publisher
	kf chan time.Time
}

func (p *tapPublisher) KeyframeRequests() <-chan time.Time { return p.kf }

// startRig renders a drive, starts the relay on 127.0.0.1 and the vehicle
// publishing to it (looping the drive), and waits for the session.
func startRig(t testing.TB, o rigOptions) *rig {
	t.Helper()
	dir := t.TempDir()
	drive := renderDrive(t, dir, o.width, o.height, o.driveS)
	rec, err := recording.Open(drive)
	if err != nil {
		t.Fatal(err)
	}
	r := &rig{t: t, rec: rec}
	if o.record {
		r.recordDir = filepath.Join(dir, "relay-recording")
	}
	cfg, err := relayConfig(rec, r.recordDir)
	if err != nil {
		t.Skip(err)
	}
	if o.alwaysTranscode {
		cfg.AlwaysTranscode = true // a run that compares both modes asks for this one
	}
	r.relay, err = relay.New(cfg)
	if err != nil {
		t.Fatal(err)
	}
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	r.srv = &http.Server{Handler: r.relay.Handler(), ReadHeaderTimeout: 5 * time.Second}
	go r.srv.Serve(ln)
	r.base = "http://" + ln.Addr().String()
	rctx, rcancel := context.WithCancel(context.Background())
	r.stopRelay = rcancel
	r.relayDone = make(chan error, 1)
	go func() { r.relayDone <- r.relay.Run(rctx) }()

	r.link, err = simvehicle.NewLink(o.link, nil)
	if err != nil {
		t.Fatal(err)
	}
	r.veh, err = simvehicle.New(simvehicle.Config{Recording: rec, Link: r.link, Loop: true,
		CacheFrames: o.cacheFrames, BitrateBps: o.bitrateBps, CPUUsed: o.vehicleCPU,
		OnFrame: func(fi simvehicle.FrameInfo) {
			r.mu.Lock()
			r.frames = append(r.frames, fi)
			r.mu.Unlock()
		}})
	if err != nil {
		t.Fatal(err)
	}
	vctx, vcancel := context.WithCancel(context.Background())
	r.stopVehicle = vcancel
	pctx, pcancel := context.WithTimeout(vctx, 10*time.Second)
	defer pcancel()
	pub, err := whip.Publish(pctx, r.base+"/whip", ingestToken, whip.PublishConfig{
		Network: whip.Network{LoopbackOnly: true},
		WireFilter: func(h *rtp.Header, payload []byte) bool {
			keep := r.link.Keep(h, payload)
			r.mu.Lock()
			r.wire = append(r.wire, wireEvent{at: time.Now(), kept: keep, seq: h.SequenceNumber, ts: h.Timestamp, marker: h.Marker})
			if keep && o.keepWire {
				r.wirePkts = append(r.wirePkts, rtp.Packet{Header: h.Clone(), Payload: append([]byte(nil), payload...)})
			}
			r.mu.Unlock()
			return keep
		},
	})
	if err != nil {
		vcancel()
		r.stop()
		t.Fatalf("publish: %v", err)
	}
	tp := &tapPublisher{Publisher: pub, kf: make(chan time.Time, 4)}
	go func() {
		for {
			select {
			case at := <-pub.KeyframeRequests():
				r.mu.Lock()
				r.plis = append(r.plis, time.Now())
				r.mu.Unlock()
				select {
				case tp.kf <- at:
				default:
				}
			case <-vctx.Done():
				return
			}
		}
	}()
	r.vehDone = make(chan error, 1)
	go func() {
		err := r.veh.Run(vctx, tp)
		_ = pub.Close()
		r.vehDone <- err
	}()
	t.Cleanup(r.stop)
	return r
}

// relayConfig is the relay configuration of every run in this package: the
// drive's camera and frame rate, the test tokens, loopback-only ICE, the
// egress mode of STOPGAP_E2E_EGRESS, and recording into recordDir unless it
// is empty.
func relayConfig(rec *recording.Recording, recordDir string) (relay.Config, error) {
	cfg := relay.Config{
		FPS:          1e6 / float64(rec.Frames[1].CaptureUs-rec.Frames[0].CaptureUs),
		Camera:       rec.Camera,
		IngestToken:  ingestToken,
		ConsoleToken: consoleToken,
		Whip:         whip.Config{Network: whip.Network{LoopbackOnly: true}},
		Logger:       quietLogger(),
		RecordDir:    recordDir,
	}
	return cfg, applyEgress(&cfg, egressMode())
}

// stop ends the vehicle, then the relay (which closes its recording).
func (r *rig) stop() {
	if r.stopped {
		return
	}
	r.stopped = true
	r.stopVehicle()
	if err := <-r.vehDone; err != nil && !errors.Is(err, context.Canceled) {
		r.t.Errorf("vehicle: %v", err)
	}
	r.stopRelay()
	if err := <-r.relayDone; err != nil {
		r.t.Errorf("relay: %v", err)
	}
	r.srv.Close()
}

// waitFor polls cond every 10 ms until it is true or the timeout passes.
func waitFor(t testing.TB, what string, timeout time.Duration, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(timeout)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatalf("timed out after %v waiting for %s", timeout, what)
		}
		time.Sleep(10 * time.Millisecond)
	}
}
