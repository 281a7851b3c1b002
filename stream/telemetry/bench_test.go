package telemetry

import "testing"

var benchMsg = []byte(`{"t_us":1712345678901234,"speed_mps":12.5,"yaw_rate_rps":-0.031,"accel_mps2":0.4,"steer_rad":-0.02,"seq":4711}`)

func BenchmarkDecode(b *testing.B) {
	b.ReportAllocs()
	b.SetBytes(int64(len(benchMsg)))
	for b.Loop() {
		if _, err := Decode(benchMsg); err != nil {
			b.Fatal(err)
		}
	}
}

func BenchmarkAppend(b *testing.B) {
	m, err := Decode(benchMsg)
	if err != nil {
		b.Fatal(err)
	}
	buf := make([]byte, 0, MaxMessageBytes)
	b.ReportAllocs()
	for b.Loop() {
		if buf, err = m.Append(buf[:0]); err != nil {
			b.Fatal(err)
		}
	}
}
