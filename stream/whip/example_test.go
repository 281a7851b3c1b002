package whip_test

import (
	"context"
	"log"
	"log/slog"
	"net/http"
	"os"
	"time"

	"stopgap/stream/ingest"
	"stopgap/stream/whip"
)

// Example serves WHIP on a loopback address and hands each connected session to the relay: RTP packets and
// telemetry are read in their own goroutines, and a keyframe is requested as soon as video starts.
func Example() {
	srv, err := whip.NewServer(whip.Config{
		Token:      os.Getenv("STOPGAP_WHIP_TOKEN"), // a long random secret shared with the vehicle
		ICETimeout: 10 * time.Second,
		Network:    whip.Network{LoopbackOnly: true},
		Logger:     slog.Default(),
		OnSession: func(s *whip.Session) {
			go func() {
				for msg := range s.Telemetry() { // closed when the session ends
					_ = msg.Data // decode with the telemetry codec
				}
			}()
			ctx := context.Background()
			for {
				pkt, arrival, err := s.ReadRTP(ctx)
				if err != nil {
					return // whip.ErrSessionClosed once the session ended
				}
				if sr, ok := s.SenderReport(); ok {
					_ = sr.SenderTimeUs(pkt.Timestamp, ingest.VideoClockRateHz) // vehicle clock, Unix us
				}
				_ = arrival // receiver clock
			}
		},
	})
	if err != nil {
		log.Print(err) // whip.ErrNoToken when STOPGAP_WHIP_TOKEN is unset
		return
	}
	defer srv.Close()
	mux := http.NewServeMux()
	mux.Handle("/whip", srv)  // POST offers here
	mux.Handle("/whip/", srv) // session resources: DELETE /whip/<id>
	hs := &http.Server{Addr: "127.0.0.1:8443", Handler: mux, ReadHeaderTimeout: 5 * time.Second}
	_ = hs // hs.ListenAndServeTLS(certFile, keyFile) outside loopback: the bearer token must not travel in clear
}

// ExamplePublish publishes to a WHIP endpoint as the simulated vehicle does and answers keyframe requests.
func ExamplePublish() {
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	pub, err := whip.Publish(ctx, "http://127.0.0.1:8443/whip", os.Getenv("STOPGAP_WHIP_TOKEN"),
		whip.PublishConfig{Network: whip.Network{LoopbackOnly: true}})
	if err != nil {
		log.Print(err) // *whip.HTTPError for 401/429/503, whip.ErrNotConnected if ICE did not come up
		return
	}
	defer pub.Close() // sends DELETE
	go func() {
		for {
			select {
			case <-pub.KeyframeRequests():
				// ask the encoder for a keyframe
			case <-pub.Done():
				return
			}
		}
	}()
	_ = pub.SendTelemetry([]byte(`{"t_us":0}`))
}
