package telemetry_test

import (
	"errors"
	"fmt"

	"stopgap/stream/telemetry"
)

func ExampleDecode() {
	m, err := telemetry.Decode([]byte(`{"t_us":1500000,"speed_mps":8.25,"yaw_rate_rps":0.05,"seq":12}`))
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println(m.TimeUs, m.SpeedMps, m.YawRateRps, m.HasAccel, m.Seq)

	_, err = telemetry.Decode([]byte(`{"t_us":1500000,"speed_mps":"fast","yaw_rate_rps":0}`))
	var de *telemetry.DecodeError
	if errors.As(err, &de) {
		fmt.Println(de.Reason, de.Key)
	}
	// Output:
	// 1500000 8.25 0.05 false 12
	// wrong-type speed_mps
}

func ExampleMessage_Append() {
	m := telemetry.Message{TimeUs: 42, SpeedMps: 13.9, YawRateRps: -0.1, SteerRad: -0.02, HasSteer: true}
	buf := make([]byte, 0, telemetry.MaxMessageBytes) // reused for every message
	buf, err := m.Append(buf[:0])
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println(string(buf))
	// Output:
	// {"t_us":42,"speed_mps":13.9,"yaw_rate_rps":-0.1,"steer_rad":-0.02}
}

func ExampleMessage_ToSample() {
	m, _ := telemetry.Decode([]byte(`{"t_us":2000,"speed_mps":3,"yaw_rate_rps":0.2,"accel_mps2":-1.5}`))
	s := m.ToSample()
	fmt.Println(s.TimeUs, s.SpeedMps, s.YawRateRps, s.HasAccel, s.AccelMps2, s.HasSteer)
	// Output:
	// 2000 3 0.2 true -1.5 false
}
