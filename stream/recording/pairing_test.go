package recording

import (
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"strings"
	"testing"

	"stopgap/internal/display"
)

// frameUs is the capture time of frame n of a 30 fps camera that powered on
// at t0Us, rounded to the microsecond as a real clock would stamp it.
func frameUs(t0Us int64, n int) int64 { return t0Us + int64(math.Round(float64(n)*1e6/30)) }

// onboardFrames returns onboard frames 0..n-1 of a camera powered on at
// t0Us, without the frames in drop (the onboard recorder lost them), numbered
// 0, 1, 2, ... as a Writer numbers them. orig maps onboard index -> camera
// frame number.
func onboardFrames(t0Us int64, n int, drop map[int]bool, rtpBase uint32) (fr []Frame, orig []int) {
	for c := 0; c < n; c++ {
		if drop[c] {
			continue
		}
		fr = append(fr, Frame{Index: len(fr), CaptureUs: frameUs(t0Us, c), File: "x.jpg",
			RTPTimestamp: rtpBase + uint32(c*3000), HasRTP: rtpBase != 0})
		orig = append(orig, c)
	}
	return fr, orig
}

func TestPairFrames(t *testing.T) {
	const t0 = 1_700_000_000_000_000
	onDrop := map[int]bool{55: true, 90: true, 91: true}
	tests := []struct {
		name string
		// session frame r is camera frame first+r, captured at its true
		// time plus offsetUs plus jitter(r); lost[r] marks frames that never
		// arrived (their row carries the nominal capture time, no RTP).
		first    int
		offsetUs int64
		rtp      bool
		// wantUnpaired: camera frames the session has but the onboard
		// recording does not.
		wantHow map[int]PairHow
	}{
		{name: "capture time, session starts 40 frames later", first: 40, offsetUs: 0,
			wantHow: map[int]PairHow{55: UnpairedNoFrame, 90: UnpairedNoFrame, 91: UnpairedNoFrame}},
		{name: "capture time within tolerance", first: 3, offsetUs: 6_000,
			wantHow: map[int]PairHow{55: UnpairedNoFrame, 90: UnpairedNoFrame, 91: UnpairedNoFrame}},
		{name: "RTP timestamps with a sender-report offset", first: 40, offsetUs: 41_000, rtp: true,
			wantHow: map[int]PairHow{55: UnpairedRTP, 90: UnpairedNoFrame, 91: UnpairedRTP}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			var base uint32
			if tc.rtp {
				base = 4_294_000_000 // wraps during the drive
			}
			onboard, orig := onboardFrames(t0, 200, onDrop, base)
			var session []SessionFrame
			lost := func(c int) bool { return c%17 == 0 || c == 90 }
			for r := 0; r < 220-tc.first; r++ { // runs past the onboard end
				c := tc.first + r
				s := SessionFrame{Index: r, CaptureUs: frameUs(t0, c) + tc.offsetUs}
				if !lost(c) {
					s.Arrived = true
					s.CaptureUs += int64(r%5) - 2 // RTP 90 kHz rounding
					if tc.rtp {
						s.RTPTimestamp, s.HasRTP = base+uint32(c*3000), true
					}
				}
				session = append(session, s)
			}
			p, err := PairFrames(session, onboard, 0)
			if err != nil {
				t.Fatalf("PairFrames: %v", err)
			}
			if p.ToleranceUs != 8_333 {
				t.Errorf("tolerance %d µs, want a quarter of 33333 µs", p.ToleranceUs)
			}
			for r, s := range session {
				c := tc.first + r
				want := tc.wantHow[c]
				switch {
				case want != PairInvalid:
				case c >= 200:
					want = UnpairedAfter
				case tc.rtp && s.HasRTP:
					want = PairedRTP
				default:
					want = PairedTime
				}
				if p.How[r] != want {
					t.Errorf("session row %d (camera frame %d): %v, want %v", r, c, p.How[r], want)
					continue
				}
				if want.Paired() && orig[p.Onboard[r]] != c {
					t.Errorf("session row %d (camera frame %d) paired with onboard %d = camera frame %d", r, c, p.Onboard[r], orig[p.Onboard[r]])
				}
			}
			if tc.rtp && (p.OffsetUs < tc.offsetUs-2 || p.OffsetUs > tc.offsetUs+2) {
				t.Errorf("offset %d µs, want %d ± 2", p.OffsetUs, tc.offsetUs)
			}
			if s := p.Summary(); !strings.Contains(s, fmt.Sprintf("%d of %d session frames paired", p.Paired(), len(session))) {
				t.Errorf("summary %q", s)
			}
		})
	}
}

// TestPairFramesClocksDisagree: a session whose capture times are 15 ms off
// the onboard clock, with no RTP timestamps to measure the offset, must fail
// and name its first frame.
func TestPairFramesClocksDisagree(t *testing.T) {
	const t0 = 5_000_000
	onboard, _ := onboardFrames(t0, 100, nil, 0)
	var session []SessionFrame
	for r := 0; r < 60; r++ {
		session = append(session, SessionFrame{Index: r, CaptureUs: frameUs(t0, 20+r) + 15_000 + int64(r%3), Arrived: true})
	}
	_, err := PairFrames(session, onboard, 0)
	var pe *PairError
	if !errors.As(err, &pe) || !errors.Is(err, ErrPairing) {
		t.Fatalf("err %v, want a *PairError", err)
	}
	if pe.SessionIndex != 0 || pe.Unpaired != 60 {
		t.Errorf("first unpaired %d, unpaired %d; want frame 0 and all 60", pe.SessionIndex, pe.Unpaired)
	}
	for _, want := range []string{"session frame 0 (t_capture_us 5681667)", "+15.0 ms", "onboard frame 20", "±8.3 ms", "clocks disagree", "rtp_timestamp"} {
		if !strings.Contains(err.Error(), want) {
			t.Errorf("message %q lacks %q", err, want)
		}
	}
	// A tolerance wider than the offset pairs them (deliberately, by the user).
	if p, err := PairFrames(session, onboard, 16_000); err != nil || p.Paired() != 60 {
		t.Errorf("with a 16 ms tolerance: %d paired, err %v", p.Paired(), err)
	}
}

func TestSessionFrames(t *testing.T) {
	frames := []Frame{{Index: 0, CaptureUs: 10}, {Index: 1, CaptureUs: 20, NoImage: true}, {Index: 2, CaptureUs: 30}}
	old := []Arrival{{Index: 0, ArrivalUs: 15, Arrived: true}, {Index: 1}, {Index: 2, ArrivalUs: 40, Arrived: true}}
	got, err := SessionFrames(old, frames)
	if err != nil {
		t.Fatal(err)
	}
	want := []SessionFrame{{Index: 0, CaptureUs: 10, Arrived: true}, {Index: 1, CaptureUs: 20}, {Index: 2, CaptureUs: 30, Arrived: true}}
	for i := range want {
		if got[i] != want[i] {
			t.Errorf("row %d: %+v, want %+v", i, got[i], want[i])
		}
	}
	if _, err := SessionFrames(old, frames[:1]); !errors.Is(err, ErrPairing) {
		t.Errorf("arrivals without capture times nor frames: err %v, want ErrPairing", err)
	}
	withCap := []Arrival{{Index: 0, CaptureUs: 7, HasCapture: true}, {Index: 1, CaptureUs: 7, HasCapture: true}}
	if _, err := SessionFrames(withCap, nil); !errors.Is(err, ErrPairing) {
		t.Errorf("repeated capture time: err %v, want ErrPairing", err)
	}
}

func TestPairTelemetry(t *testing.T) {
	var onboard, session []TelemetryRow
	for i := 0; i < 100; i++ {
		onboard = append(onboard, TelemetryRow{TimeUs: 1000 + int64(i)*10_000})
		if i%7 != 3 && i >= 5 {
			session = append(session, TelemetryRow{TimeUs: 1000 + int64(i)*10_000, ArrivalUs: int64(i), HasArrival: true})
		}
	}
	got := PairTelemetry(session, onboard, 0)
	for j, s := range got {
		lost := j%7 == 3 || j < 5
		if lost != (s < 0) || (s >= 0 && session[s].TimeUs != onboard[j].TimeUs) {
			t.Errorf("onboard row %d -> session row %d (lost %v)", j, s, lost)
		}
	}
}

func TestReadSessionTicks(t *testing.T) {
	good := "tick,state,age_ms,confidence,cutoff\n0,LIVE,0.000,1.0000,0.5000\n1,PREDICTED,66.667,0.9000,0.5000\n2,STA"
	rows, warns, err := decodeSessionTicks("ticks.csv", []byte(good))
	if err != nil || len(rows) != 2 || len(warns) != 1 {
		t.Fatalf("rows %+v warns %q err %v; want 2 rows and the cut last line dropped", rows, warns, err)
	}
	if rows[1] != (SessionTick{Tick: 1, State: display.StatePredicted, AgeMs: 66.667, Confidence: 0.9, Cutoff: 0.5}) {
		t.Errorf("row 1 %+v", rows[1])
	}
	for _, bad := range []string{
		"tick,state\n0,LIVE\n0,STALE\n",
		"tick,state\n0,SHOWN\n",
		"tick,state\n-1,LIVE\n",
	} {
		var pe *ParseError
		if _, _, err := decodeSessionTicks("ticks.csv", []byte(bad)); !errors.As(err, &pe) || pe.Line != 2 && pe.Line != 3 {
			t.Errorf("%q: err %v, want a ParseError with its line", bad, err)
		}
	}
}

// FuzzPairFrames builds an onboard recording and a session from arbitrary
// bytes and checks PairFrames against an independent recomputation: every
// time pair is within the tolerance after the offset, every RTP pair has
// equal timestamps, no onboard frame is used twice, and the reasons of the
// unpaired rows hold.
func FuzzPairFrames(f *testing.F) {
	f.Add([]byte{10, 20, 30, 40, 50, 60, 70, 80}, int64(0), int64(0))
	f.Add([]byte{33, 33, 33, 33, 1, 200, 33, 33, 34, 33}, int64(5000), int64(16000))
	f.Add([]byte{255, 0, 255, 0, 7, 7, 7}, int64(-40000), int64(1))
	f.Fuzz(func(t *testing.T, data []byte, offsetUs, tolUs int64) {
		if len(data) < 2 || offsetUs > 1e9 || offsetUs < -1e9 || tolUs > 1e9 {
			return
		}
		var onboard []Frame
		var session []SessionFrame
		tOn, tS := int64(0), int64(0)
		for i, b := range data {
			tOn += int64(b)*500 + 1
			onboard = append(onboard, Frame{Index: i, CaptureUs: tOn, HasRTP: b%3 == 0, RTPTimestamp: uint32(tOn / 11)})
			if b%5 != 0 {
				tS += int64(binary.LittleEndian.Uint16([]byte{b, data[(i+1)%len(data)]}))%40000 + 1
				session = append(session, SessionFrame{Index: len(session), CaptureUs: tS + offsetUs, Arrived: b%2 == 0,
					HasRTP: b%4 == 0, RTPTimestamp: uint32(tS / 11)})
			}
		}
		if len(session) == 0 {
			return
		}
		p, err := PairFrames(session, onboard, tolUs)
		if err != nil {
			var pe *PairError
			if !errors.Is(err, ErrPairing) || (errors.As(err, &pe) && !strings.Contains(err.Error(), fmt.Sprintf("session frame %d ", pe.SessionIndex))) {
				t.Fatalf("error %v", err)
			}
			return
		}
		used := map[int]bool{}
		for i, h := range p.How {
			j := p.Onboard[i]
			if h.Paired() != (j >= 0) {
				t.Fatalf("row %d: %v with onboard %d", i, h, j)
			}
			if j >= 0 {
				if used[j] {
					t.Fatalf("onboard frame %d paired twice", j)
				}
				used[j] = true
			}
			d := session[i].CaptureUs - p.OffsetUs - onboard[max(j, 0)].CaptureUs
			switch h {
			case PairedRTP:
				if !session[i].HasRTP || !onboard[j].HasRTP || session[i].RTPTimestamp != onboard[j].RTPTimestamp {
					t.Fatalf("row %d paired by RTP with onboard %d of another timestamp", i, j)
				}
			case PairedTime:
				if d > p.ToleranceUs || d < -p.ToleranceUs {
					t.Fatalf("row %d paired %d µs away, tolerance %d", i, d, p.ToleranceUs)
				}
			case UnpairedBefore:
				if session[i].CaptureUs-p.OffsetUs >= onboard[0].CaptureUs-p.ToleranceUs {
					t.Fatalf("row %d said before the onboard recording", i)
				}
			case UnpairedAfter:
				if session[i].CaptureUs-p.OffsetUs <= onboard[len(onboard)-1].CaptureUs+p.ToleranceUs {
					t.Fatalf("row %d said after the onboard recording", i)
				}
			case UnpairedNoFrame, UnpairedRTP:
			default:
				t.Fatalf("row %d: %v", i, h)
			}
		}
	})
}

// FuzzSessionTicks feeds arbitrary bytes as a session's ticks.csv: accepted
// rows, written back in the relay's format and read again, are the same.
func FuzzSessionTicks(f *testing.F) {
	f.Add([]byte("tick,state,age_ms,confidence,cutoff\n0,LIVE,0.000,1.0000,0.5000\n1,PREDICTED,66.667,0.9000,0.5000\n"))
	f.Add([]byte("state,tick\nSTALE,3\nNOT_SHOWN,1\nNO_PICTURE,2\n"))
	f.Add([]byte("tick,state,age_ms\n0,LIVE,NaN\n"))
	f.Add([]byte("tick,state\n0,LIVE\n1,STA"))
	f.Fuzz(func(t *testing.T, data []byte) {
		rows, _, err := decodeSessionTicks("ticks.csv", data)
		if err != nil {
			var pe *ParseError
			if !errors.As(err, &pe) || pe.Line < 1 {
				t.Fatalf("error %v is not a *ParseError with a line", err)
			}
			return
		}
		var b strings.Builder
		b.WriteString("tick,state,age_ms,confidence,cutoff\n")
		for _, r := range rows {
			fmt.Fprintf(&b, "%d,%s,%v,%v,%v\n", r.Tick, r.State, r.AgeMs, r.Confidence, r.Cutoff)
		}
		again, _, err := decodeSessionTicks("ticks.csv", []byte(b.String()))
		if err != nil || len(again) != len(rows) {
			t.Fatalf("re-reading %q: %v", b.String(), err)
		}
		for i := range rows {
			if again[i] != rows[i] {
				t.Fatalf("row %d: %+v then %+v", i, rows[i], again[i])
			}
		}
	})
}
