package recording

import (
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
	"testing"
)

// FuzzOpenFrames feeds arbitrary bytes as frames.csv. It must never panic;
// on success the frames obey the format's invariants, and on failure the
// error is a *ParseError naming the file.
func FuzzOpenFrames(f *testing.F) {
	f.Add([]byte(validFrames))
	f.Add([]byte("index,t_capture_us\n0,0\n1,33333\n"))
	f.Add([]byte("file,t_capture_us,index\r\nframes/a.jpg,-5,0\r\nframes/b.jpg,7,1"))
	f.Add([]byte("\ufeffindex,t_capture_us,file\n0,1,../x\n"))
	f.Add([]byte("index,t_capture_us,file\n0,9223372036854775807,frames/a.jpg\n1,-9223372036854775808,frames/b.jpg\n"))
	f.Add([]byte("index,index\n"))
	f.Add([]byte(""))
	f.Add([]byte("index,t_capture_us,file\n\n"))
	f.Add([]byte("index,t_capture_us,file,rtp_timestamp\n0,1,frames/a.jpg,4294967295\n1,2,frames/b.jpg,\n2,3,,0\n"))
	f.Add([]byte("index,t_capture_us,file,rtp_timestamp\n0,1,frames/a.jpg,4294967296\n"))
	f.Add([]byte("index,t_capture_us,file,rtp_timestamp\n0,1,frames/a.jpg,-1\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		// Pretend every local file under frames/ exists.
		check := func(rel string) error {
			if strings.HasPrefix(rel, "frames/") {
				return nil
			}
			return errors.New("file does not exist")
		}
		res, err := decodeFrames("frames.csv", data, check)
		if err != nil {
			var pe *ParseError
			if !errors.As(err, &pe) || pe.File != "frames.csv" || pe.Line < 1 {
				t.Fatalf("error %v is not a *ParseError with a line", err)
			}
			return
		}
		for i, fr := range res.frames {
			if fr.Index != i {
				t.Fatalf("frame %d has index %d", i, fr.Index)
			}
			if i > 0 && fr.CaptureUs <= res.frames[i-1].CaptureUs {
				t.Fatalf("capture times not increasing at %d", i)
			}
			if res.hasFiles != (fr.File != "" || fr.NoImage) || fr.NoImage && fr.File != "" {
				t.Fatalf("file %q with hasFiles %v", fr.File, res.hasFiles)
			}
		}
	})
}

// FuzzTelemetryCSV feeds arbitrary bytes as telemetry.csv. It must never
// panic; accepted rows are finite and strictly increasing in time.
func FuzzTelemetryCSV(f *testing.F) {
	f.Add([]byte(validTelemetry))
	f.Add([]byte("t_us,speed_mps,yaw_rate_rps,accel_mps2,steer_rad,t_arrival_us\n1,2,0,,,\n2,2,0,0.1,0.02,77\n"))
	f.Add([]byte("t_us,speed_mps,yaw_rate_rps\n1,NaN,0\n"))
	f.Add([]byte("t_us,speed_mps,yaw_rate_rps\n1,1e999,0\n2,0x1p-2,0"))
	f.Add([]byte("yaw_rate_rps,t_us,speed_mps,extra\n0,1,2,x\n"))
	f.Add([]byte("t_us,speed_mps,yaw_rate_rps\n1,2,\"3\"\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		rows, _, _, err := decodeTelemetry("telemetry.csv", data)
		if err != nil {
			var pe *ParseError
			if !errors.As(err, &pe) || pe.Line < 1 {
				t.Fatalf("error %v is not a *ParseError with a line", err)
			}
			return
		}
		for i, r := range rows {
			for _, v := range []float64{r.SpeedMps, r.YawRateRps, r.AccelMps2, r.SteerRad} {
				if math.IsNaN(v) || math.IsInf(v, 0) {
					t.Fatalf("row %d has a non-finite value: %+v", i, r)
				}
			}
			if i > 0 && r.TimeUs <= rows[i-1].TimeUs {
				t.Fatalf("times not increasing at row %d", i)
			}
		}
	})
}

// FuzzArrivalsCSV feeds arbitrary bytes as an arrivals file: accepted rows,
// written back with every column and read again, are the same.
func FuzzArrivalsCSV(f *testing.F) {
	f.Add([]byte("index,t_arrival_us,t_deadline_us,t_capture_us,rtp_timestamp\n0,5000,6000,1000,4294967295\n1,,39333,34333,\n"))
	f.Add([]byte("index,t_arrival_us\n0,1\n2,\n1,7\n"))
	f.Add([]byte("rtp_timestamp,index,t_arrival_us,t_capture_us\n12,0,1,5\n13,1,2,5\n"))
	f.Add([]byte("index,t_arrival_us,rtp_timestamp\n0,1,4294967296\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		rows, _, _, err := decodeArrivals("arrivals.csv", data, -1, false)
		if err != nil {
			var pe *ParseError
			if !errors.As(err, &pe) || pe.Line < 1 {
				t.Fatalf("error %v is not a *ParseError with a line", err)
			}
			return
		}
		var b strings.Builder
		b.WriteString(arrivalsHeader)
		opt := func(v int64, ok bool) string {
			if !ok {
				return ""
			}
			return strconv.FormatInt(v, 10)
		}
		for _, a := range rows {
			fmt.Fprintf(&b, "%d,%s,%s,%s,%s\n", a.Index, opt(a.ArrivalUs, a.Arrived), opt(a.DeadlineUs, a.HasDeadline),
				opt(a.CaptureUs, a.HasCapture), opt(int64(a.RTPTimestamp), a.HasRTP))
		}
		again, _, _, err := decodeArrivals("arrivals.csv", []byte(b.String()), -1, false)
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
