package telemetry

import (
	"encoding/json"
	"errors"
	"testing"
)

// FuzzDecode decodes arbitrary octets. It must never panic; every error is
// a *DecodeError with a valid reason; everything accepted is valid JSON to
// encoding/json (the reference) and survives Decode -> Encode -> Decode
// unchanged.
func FuzzDecode(f *testing.F) {
	for _, s := range []string{
		`{"t_us":1712345678901234,"speed_mps":12.5,"yaw_rate_rps":-0.031,"accel_mps2":0.4,"steer_rad":-0.02,"seq":4711}`,
		`{"t_us":0,"speed_mps":-0,"yaw_rate_rps":1e-300}`,
		`{"t_us":1,"speed_mps":0,"yaw_rate_rps":0,"x":{"a":[1,{"b":null}]}}`,
		`{"t_us":1,"speed_mps":0,"yaw_rate_rps":0,"t_us":2}`,
		`{"t_us":1.5,"speed_mps":0,"yaw_rate_rps":0}`,
		`{"t_us":1,"speed_mps":1e400,"yaw_rate_rps":0}`,
		`{"t\u005fus":7,"speed_mps":0,"yaw_rate_rps":0}`,
		`{"t_us":1,"speed_mps":0,"yaw_rate_rps":0} x`,
		"{\"n\":\"\xff\"}",
		`[]`, ``, `{`, `null`,
	} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, b []byte) {
		m, err := Decode(b)
		if err != nil {
			var de *DecodeError
			if !errors.As(err, &de) || de.Reason == ReasonInvalid || de.Reason >= reasonCount {
				t.Fatalf("error %v is not a *DecodeError with a valid reason", err)
			}
			if de.Reason == ReasonSyntax && len(b) <= MaxMessageBytes && json.Valid(b) {
				t.Fatalf("syntax error for input encoding/json calls valid: %q (%v)", b, err)
			}
			return
		}
		if !json.Valid(b) {
			t.Fatalf("accepted input encoding/json calls invalid: %q", b)
		}
		out, err := Encode(m)
		if err != nil {
			t.Fatalf("accepted message %+v does not encode: %v", m, err)
		}
		if len(out) > MaxMessageBytes {
			t.Fatalf("encoding of %+v is %d octets", m, len(out))
		}
		back, err := Decode(out)
		if err != nil || back != m {
			t.Fatalf("round trip: %+v -> %s -> %+v (%v)", m, out, back, err)
		}
	})
}

// FuzzDecodePlain checks Decode's fast path against the strict path: every
// input decodePlain accepts, the strict path accepts too, with the same
// Message. (Decode's own fuzz target covers the rejections.)
func FuzzDecodePlain(f *testing.F) {
	for _, s := range []string{
		`{"t_us":1712345678901234,"speed_mps":12.5,"yaw_rate_rps":-0.031,"accel_mps2":0.4,"steer_rad":-0.02,"seq":4711}`,
		`{"seq":1,"yaw_rate_rps":0,"speed_mps":-0,"t_us":0}`,
		`{"t_us":0,"speed_mps":-0.0e-0,"yaw_rate_rps":1E+2}`,
		`{"t_us":1,"speed_mps":0,"yaw_rate_rps":0,"t_us":2}`,
		`{"t_us":01,"speed_mps":0,"yaw_rate_rps":0}`,
		`{"t_us":1.5,"speed_mps":0,"yaw_rate_rps":0}`,
		`{"t_us":1,"speed_mps":1e400,"yaw_rate_rps":0}`,
		`{"t_us":1,"speed_mps":-,"yaw_rate_rps":0}`,
		`{"t_us":1,"speed_mps":0,"yaw_rate_rps":0,"seq":-0}`,
		`{"t_us":1,"speed_mps":0,"yaw_rate_rps":0,}`,
		`{"t_us":1,"speed_mps":0}`,
	} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, b []byte) {
		m, ok := decodePlain(b)
		if !ok {
			return
		}
		want, err := decodeStrict(b)
		if err != nil {
			t.Fatalf("fast path accepted %q, the strict path rejects it: %v", b, err)
		}
		if m != want {
			t.Fatalf("%q: fast path %+v, strict path %+v", b, m, want)
		}
	})
}

// TestDecodePlainTaken: what our senders write takes the fast path, so the
// fuzz target above is not checking dead code.
func TestDecodePlainTaken(t *testing.T) {
	for _, m := range []Message{
		{TimeUs: 1712345678901234, SpeedMps: 12.5, YawRateRps: -0.031},
		{TimeUs: 7, SpeedMps: -3e-7, YawRateRps: 1e-300, AccelMps2: 0.4, HasAccel: true, SteerRad: -0.02, HasSteer: true, Seq: 4294967295, HasSeq: true},
	} {
		b, err := Encode(m)
		if err != nil {
			t.Fatal(err)
		}
		got, ok := decodePlain(b)
		if !ok || got != m {
			t.Errorf("%s: fast path %v, %+v; want %+v", b, ok, got, m)
		}
	}
}
