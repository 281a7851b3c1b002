package ingest

import (
	"testing"
)

// Worked values. The NTP-to-Unix offset of 2 208 988 800 s is (70*365 + 17) * 86400 (RFC 5905 section 6 gives
// the 1900 prime epoch; RFC 868 lists 2 208 988 800 as the time-protocol value of 1970-01-01).
// 1 700 000 000 s Unix + 2 208 988 800 = 3 908 988 800 = 0xE8FE6F80 (checked with `printf %X 3908988800`).
func TestNTPToUnixUs(t *testing.T) {
	tests := []struct {
		name string
		ntp  uint64
		want int64
	}{
		{"unix epoch", uint64(2208988800) << 32, 0},
		{"unix epoch plus half second", uint64(2208988800)<<32 | 0x80000000, 500_000},
		{"quarter second", uint64(2208988800)<<32 | 0x40000000, 250_000},
		// 1/2^32 s = 0.000232830... us rounds to 0.
		{"one fraction unit", uint64(2208988800)<<32 | 1, 0},
		// 0xFFFFFFFF/2^32 s = 999999.99977 us rounds up into the next second.
		{"fraction rounds into next second", uint64(2208988800)<<32 | 0xFFFFFFFF, 1_000_000},
		{"2023-11-14T22:13:20Z (date -u -d @1700000000)", uint64(0xE8FE6F80) << 32, 1_700_000_000_000_000},
		// RFC 4330 section 3: seconds with MSB 0 lie in era 1; NTP second 0 of era 1 is
		// 2036-02-07T06:28:16Z = 2^32 - 2 208 988 800 = 2 085 978 496 s Unix (`date -u -d @2085978496`).
		{"era 1 start", 0, 2_085_978_496_000_000},
		{"era 1 plus 10 s", uint64(10) << 32, 2_085_978_506_000_000},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if got := NTPToUnixUs(tc.ntp); got != tc.want {
				t.Fatalf("NTPToUnixUs(%#x) = %d, want %d", tc.ntp, got, tc.want)
			}
		})
	}
}

func TestUnixUsToNTPRoundTrip(t *testing.T) {
	for _, us := range []int64{
		0, 1, 499_999, 500_000, 999_999, 1_700_000_000_123_456, -1, // -1: 1969-12-31T23:59:59.999999Z
		2_085_978_495_999_999, 2_085_978_496_000_000, // either side of the 2036 era boundary
	} {
		ntp := UnixUsToNTP(us)
		if got := NTPToUnixUs(ntp); got != us {
			t.Errorf("round trip %d -> %#x -> %d", us, ntp, got)
		}
	}
	// Direct worked value: 0.5 s after the Unix epoch is fraction 0x80000000.
	if got, want := UnixUsToNTP(500_000), uint64(2208988800)<<32|0x80000000; got != want {
		t.Errorf("UnixUsToNTP(500000) = %#x, want %#x", got, want)
	}
}

func TestSenderTimeUs(t *testing.T) {
	base := uint64(0xE8FE6F80)<<32 | 0x80000000 // 1 700 000 000.5 s Unix
	const baseUs = 1_700_000_000_500_000
	tests := []struct {
		name   string
		srRTP  uint32
		ts     uint32
		rate   uint32
		wantUs int64
	}{
		{"same instant", 1000, 1000, 90000, baseUs},
		{"one second later", 1000, 91000, 90000, baseUs + 1_000_000},
		{"one frame at 30 fps earlier", 3000, 0, 90000, baseUs - 33_333}, // 3000/90000 s = 33 333.3 us
		// 0xFFFFFF00 -> 0x100 is 512 ticks forward across the 32-bit wrap: 512/90000 s = 5688.9 us -> 5689.
		{"forward across wrap", 0xFFFFFF00, 0x00000100, 90000, baseUs + 5689},
		// 100 -> 0xFFFFFFF0 is 116 ticks backward across the wrap: -1288.9 us -> -1289.
		{"backward across wrap", 100, 0xFFFFFFF0, 90000, baseUs - 1289},
		// Half-tick rounding: 45 ticks at 90 kHz is exactly 500 us; 1 tick at 2 MHz is 0.5 us -> 1 (away from 0).
		{"half microsecond rounds away from zero", 0, 1, 2_000_000, baseUs + 1},
		{"negative half microsecond", 1, 0, 2_000_000, baseUs - 1},
		{"zero rate", 0, 90000, 0, 0},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			sr := SenderReport{NTPTime: base, RTPTime: tc.srRTP}
			if got := sr.SenderTimeUs(tc.ts, tc.rate); got != tc.wantUs {
				t.Fatalf("SenderTimeUs = %d, want %d (diff %d)", got, tc.wantUs, got-tc.wantUs)
			}
		})
	}
}
