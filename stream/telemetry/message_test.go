package telemetry

import (
	"encoding/json"
	"errors"
	"math"
	"strings"
	"testing"
)

func TestDecode(t *testing.T) {
	full := Message{TimeUs: 1712345678901234, SpeedMps: 12.5, YawRateRps: -0.031, AccelMps2: 0.4, HasAccel: true,
		SteerRad: -0.02, HasSteer: true, Seq: 4711, HasSeq: true}
	tests := []struct {
		name   string
		in     string
		want   Message
		reason Reason
		key    string
	}{
		{"all fields", `{"t_us":1712345678901234,"speed_mps":12.5,"yaw_rate_rps":-0.031,"accel_mps2":0.4,"steer_rad":-0.02,"seq":4711}`, full, 0, ""},
		{"required only, any order, white space", " {\"yaw_rate_rps\" : 0 ,\n\"speed_mps\":-3e-1, \"t_us\":0 }\r\n\t",
			Message{SpeedMps: -0.3}, 0, ""},
		{"unknown keys of any type are ignored", `{"t_us":5,"speed_mps":1,"yaw_rate_rps":2,"gear":"D","x":{"a":[1,{"b":null}]},"y":null}`,
			Message{TimeUs: 5, SpeedMps: 1, YawRateRps: 2}, 0, ""},
		{"largest t_us and seq", `{"t_us":9007199254740991,"speed_mps":1000,"yaw_rate_rps":-100,"seq":4294967295}`,
			Message{TimeUs: 1<<53 - 1, SpeedMps: 1000, YawRateRps: -100, Seq: math.MaxUint32, HasSeq: true}, 0, ""},
		{"underflow reads as zero", `{"t_us":1,"speed_mps":1e-400,"yaw_rate_rps":0}`, Message{TimeUs: 1}, 0, ""},
		{"escaped key", `{"t\u005fus":7,"speed_mps":0,"yaw_rate_rps":0}`, Message{TimeUs: 7}, 0, ""},

		{"too large", `{"t_us":1,"speed_mps":0,"yaw_rate_rps":0,"pad":"` + strings.Repeat("x", 1000) + `"}`, Message{}, ReasonTooLarge, ""},
		{"invalid UTF-8", "{\"t_us\":1,\"speed_mps\":0,\"yaw_rate_rps\":0,\"n\":\"\xff\"}", Message{}, ReasonNotUTF8, ""},
		{"empty", ``, Message{}, ReasonSyntax, ""},
		{"truncated", `{"t_us":1,"speed_mps":0`, Message{}, ReasonSyntax, ""},
		{"missing comma", `{"t_us":1 "speed_mps":0,"yaw_rate_rps":0}`, Message{}, ReasonSyntax, ""},
		{"trailing comma", `{"t_us":1,"speed_mps":0,"yaw_rate_rps":0,}`, Message{}, ReasonSyntax, ""},
		{"NaN is not JSON", `{"t_us":1,"speed_mps":NaN,"yaw_rate_rps":0}`, Message{}, ReasonSyntax, ""},
		{"array", `[1,2]`, Message{}, ReasonNotObject, ""},
		{"number", `42`, Message{}, ReasonNotObject, ""},
		{"duplicate key", `{"t_us":1,"speed_mps":0,"yaw_rate_rps":0,"t_us":2}`, Message{}, ReasonDuplicateKey, "t_us"},
		{"duplicate unknown key", `{"t_us":1,"speed_mps":0,"yaw_rate_rps":0,"a":1,"a":1}`, Message{}, ReasonDuplicateKey, "a"},
		{"duplicate via escape", `{"t_us":1,"speed_mps":0,"yaw_rate_rps":0,"seq":1,"se\u0071":2}`, Message{}, ReasonDuplicateKey, "seq"},
		{"string value", `{"t_us":"1","speed_mps":0,"yaw_rate_rps":0}`, Message{}, ReasonWrongType, "t_us"},
		{"null optional", `{"t_us":1,"speed_mps":0,"yaw_rate_rps":0,"accel_mps2":null}`, Message{}, ReasonWrongType, "accel_mps2"},
		{"boolean", `{"t_us":1,"speed_mps":true,"yaw_rate_rps":0}`, Message{}, ReasonWrongType, "speed_mps"},
		{"object value", `{"t_us":1,"speed_mps":0,"yaw_rate_rps":{}}`, Message{}, ReasonWrongType, "yaw_rate_rps"},
		{"fractional t_us", `{"t_us":1.5,"speed_mps":0,"yaw_rate_rps":0}`, Message{}, ReasonWrongType, "t_us"},
		{"exponent t_us", `{"t_us":1e6,"speed_mps":0,"yaw_rate_rps":0}`, Message{}, ReasonWrongType, "t_us"},
		{"fractional seq", `{"t_us":1,"speed_mps":0,"yaw_rate_rps":0,"seq":2.0}`, Message{}, ReasonWrongType, "seq"},
		{"case matters", `{"T_US":1,"speed_mps":0,"yaw_rate_rps":0}`, Message{}, ReasonMissingField, "t_us"},
		{"missing speed", `{"t_us":1,"yaw_rate_rps":0}`, Message{}, ReasonMissingField, "speed_mps"},
		{"missing yaw rate", `{"t_us":1,"speed_mps":0}`, Message{}, ReasonMissingField, "yaw_rate_rps"},
		{"negative t_us", `{"t_us":-1,"speed_mps":0,"yaw_rate_rps":0}`, Message{}, ReasonOutOfRange, "t_us"},
		{"t_us past 2^53-1", `{"t_us":9007199254740992,"speed_mps":0,"yaw_rate_rps":0}`, Message{}, ReasonOutOfRange, "t_us"},
		{"t_us past int64", `{"t_us":99999999999999999999,"speed_mps":0,"yaw_rate_rps":0}`, Message{}, ReasonOutOfRange, "t_us"},
		{"huge float", `{"t_us":1,"speed_mps":1e400,"yaw_rate_rps":0}`, Message{}, ReasonOutOfRange, "speed_mps"},
		{"absurd speed", `{"t_us":1,"speed_mps":1000.5,"yaw_rate_rps":0}`, Message{}, ReasonOutOfRange, "speed_mps"},
		{"absurd yaw rate", `{"t_us":1,"speed_mps":0,"yaw_rate_rps":-100.01}`, Message{}, ReasonOutOfRange, "yaw_rate_rps"},
		{"absurd accel", `{"t_us":1,"speed_mps":0,"yaw_rate_rps":0,"accel_mps2":2000}`, Message{}, ReasonOutOfRange, "accel_mps2"},
		{"absurd steer", `{"t_us":1,"speed_mps":0,"yaw_rate_rps":0,"steer_rad":7}`, Message{}, ReasonOutOfRange, "steer_rad"},
		{"negative seq", `{"t_us":1,"speed_mps":0,"yaw_rate_rps":0,"seq":-1}`, Message{}, ReasonOutOfRange, "seq"},
		{"seq past 32 bits", `{"t_us":1,"speed_mps":0,"yaw_rate_rps":0,"seq":4294967296}`, Message{}, ReasonOutOfRange, "seq"},
		{"trailing garbage", `{"t_us":1,"speed_mps":0,"yaw_rate_rps":0} x`, Message{}, ReasonTrailingData, ""},
		{"two objects", `{"t_us":1,"speed_mps":0,"yaw_rate_rps":0}{}`, Message{}, ReasonTrailingData, ""},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			m, err := Decode([]byte(tc.in))
			if tc.reason == ReasonInvalid {
				if err != nil || m != tc.want {
					t.Fatalf("got %+v, %v; want %+v", m, err, tc.want)
				}
				// encoding/json as the reference reader agrees the input is JSON.
				if !json.Valid([]byte(tc.in)) {
					t.Error("accepted input that encoding/json calls invalid")
				}
				return
			}
			var de *DecodeError
			if !errors.As(err, &de) || de.Reason != tc.reason || de.Key != tc.key || ReasonOf(err) != tc.reason {
				t.Fatalf("err = %v; want reason %v key %q", err, tc.reason, tc.key)
			}
			if !errors.Is(err, reasonErrs[tc.reason]) {
				t.Errorf("error does not wrap %v", reasonErrs[tc.reason])
			}
			if m != (Message{}) {
				t.Errorf("rejected message returned non-zero %+v", m)
			}
		})
	}
}

func TestEncode(t *testing.T) {
	tests := []struct {
		name string
		m    Message
		want string
		key  string
	}{
		{"required only", Message{TimeUs: 1, SpeedMps: 12.5, YawRateRps: -0.031},
			`{"t_us":1,"speed_mps":12.5,"yaw_rate_rps":-0.031}`, ""},
		{"all fields", Message{TimeUs: 2, SpeedMps: 1e-7, YawRateRps: 0, AccelMps2: -0.4, HasAccel: true,
			SteerRad: math.Copysign(0, -1), HasSteer: true, Seq: 9, HasSeq: true},
			`{"t_us":2,"speed_mps":1e-07,"yaw_rate_rps":0,"accel_mps2":-0.4,"steer_rad":-0,"seq":9}`, ""},
		{"absent optionals are not checked", Message{AccelMps2: math.NaN(), SteerRad: math.Inf(1)},
			`{"t_us":0,"speed_mps":0,"yaw_rate_rps":0}`, ""},
		{"NaN speed", Message{SpeedMps: math.NaN()}, "", KeySpeedMps},
		{"Inf yaw rate", Message{YawRateRps: math.Inf(-1)}, "", KeyYawRateRps},
		{"absurd accel", Message{AccelMps2: 1e4, HasAccel: true}, "", KeyAccelMps2},
		{"NaN steer", Message{SteerRad: math.NaN(), HasSteer: true}, "", KeySteerRad},
		{"negative time", Message{TimeUs: -1}, "", KeyTimeUs},
		{"time past 2^53-1", Message{TimeUs: 1 << 53}, "", KeyTimeUs},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			b, err := Encode(tc.m)
			if tc.key != "" {
				var ee *EncodeError
				if !errors.As(err, &ee) || ee.Key != tc.key || !errors.Is(err, ErrOutOfRange) {
					t.Fatalf("err = %v, want ErrOutOfRange for %q", err, tc.key)
				}
				return
			}
			if err != nil || string(b) != tc.want {
				t.Fatalf("got %s, %v; want %s", b, err, tc.want)
			}
			back, err := Decode(b)
			want := tc.m
			if !want.HasAccel {
				want.AccelMps2 = 0
			}
			if !want.HasSteer {
				want.SteerRad = 0
			}
			if err != nil || back != want {
				t.Errorf("decoded back %+v, %v", back, err)
			}
		})
	}
}

func TestAppendDoesNotAllocate(t *testing.T) {
	m := Message{TimeUs: 1712345678901234, SpeedMps: 12.5, YawRateRps: -0.031, AccelMps2: 0.4, HasAccel: true, Seq: 1, HasSeq: true}
	buf := make([]byte, 0, MaxMessageBytes)
	allocs := testing.AllocsPerRun(100, func() {
		var err error
		if buf, err = m.Append(buf[:0]); err != nil {
			t.Fatal(err)
		}
	})
	if allocs != 0 {
		t.Errorf("Append allocates %v times per call into a large enough buffer", allocs)
	}
}

func TestToSample(t *testing.T) {
	m := Message{TimeUs: 3, SpeedMps: 4, YawRateRps: 5, AccelMps2: 6, HasAccel: true, SteerRad: 7, HasSteer: false, Seq: 8, HasSeq: true}
	s := m.ToSample()
	if s.TimeUs != 3 || s.SpeedMps != 4 || s.YawRateRps != 5 || s.AccelMps2 != 6 || !s.HasAccel || s.SteerRad != 7 || s.HasSteer {
		t.Errorf("ToSample = %+v", s)
	}
}

func TestReasonString(t *testing.T) {
	for r := ReasonInvalid; r <= reasonCount; r++ {
		if r.String() == "" {
			t.Errorf("Reason(%d) has no name", r)
		}
	}
	if ReasonWrongType.String() != "wrong-type" || Reason(99).String() != "Reason(99)" {
		t.Error("unexpected names")
	}
}
