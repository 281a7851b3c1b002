package relay_test

import (
	"context"
	"fmt"
	"log"
	"net"
	"net/http"
	"os"
	"os/signal"

	"stopgap/stream/console"
	"stopgap/stream/relay"
)

// Example wires a relay to an HTTP server on loopback: the vehicle publishes
// to /whip with the ingest token, the operator opens the console URL.
func Example() {
	cam, err := relay.ReadCameraFile("camera.json")
	if err != nil {
		log.Fatal(err)
	}
	ingest, _ := console.NewToken()
	operator, _ := console.NewToken()
	r, err := relay.New(relay.Config{Camera: cam, IngestToken: ingest, ConsoleToken: operator, RecordDir: "drive-2026-12-02"})
	if err != nil {
		log.Fatal(err)
	}
	ln, err := net.Listen("tcp", "127.0.0.1:8443")
	if err != nil {
		log.Fatal(err)
	}
	go http.Serve(ln, r.Handler())
	fmt.Println("operator console:", r.ConsoleURL("http://"+ln.Addr().String()))

	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt)
	defer stop()
	if err := r.Run(ctx); err != nil { // until Ctrl-C; finishes the recording
		log.Fatal(err)
	}
}
