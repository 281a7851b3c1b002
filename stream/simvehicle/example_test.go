package simvehicle_test

import (
	"fmt"
	"time"

	"stopgap/internal/lossmodel"
	"stopgap/stream/simvehicle"
)

func ExampleParseOutage() {
	o, err := simvehicle.ParseOutage("3s+1.5s@10s")
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println(o.At, o.Duration, o.Every)
	// Output: 3s 1.5s 10s
}

// A link that loses 2 % of the packets in bursts of 40 ms on average, adds
// 30 ms of delay and up to 10 ms of jitter, and is cut for 500 ms two seconds
// after the vehicle starts. Pass it as simvehicle.Config.Link; Vehicle.Publish
// installs its wire filter in the WHIP publisher.
func ExampleNewLink() {
	link, err := simvehicle.NewLink(simvehicle.LinkConfig{
		Loss: lossmodel.Config{Model: lossmodel.GilbertElliott, LossRate: 0.02, BurstMs: 40,
			ExtraDelayMs: 30, JitterMs: 10, Seed: 1},
		Outages: []simvehicle.Outage{{At: 2 * time.Second, Duration: 500 * time.Millisecond}},
	}, nil)
	if err != nil {
		fmt.Println(err)
		return
	}
	c := link.Config()
	fmt.Println(c.Loss.Model, c.Outages[0], c.QueuePackets)
	// Output: gilbert-elliott 2s+500ms 4096
}
