package opfit

import (
	"bufio"
	"fmt"
	"os"
	"path/filepath"
	"strconv"

	"stopgap/internal/camera"
	"stopgap/stream/operator"
	"stopgap/stream/recording"
	"stopgap/stream/relay"
)

// WriteRecording writes a simulated drive as the relay would have recorded
// it, for testing the fit end to end: camera.json, frames.csv (no images:
// every file blank), truth.csv and telemetry.csv at the frame times (yaw
// rate from consecutive headings), arrivals.csv with each
// tick's deadline, shown.csv, the operator's controls.csv (received 1 ms
// after they were sampled) and the road's PathFile. dir must not exist.
func (co *Course) WriteRecording(dir string, r SimResult) error {
	if err := os.Mkdir(dir, 0o755); err != nil {
		return err
	}
	cam, err := camera.Marshal(co.cam)
	if err != nil {
		return err
	}
	files := map[string]func(w *bufio.Writer) error{
		recording.CameraFile: func(w *bufio.Writer) error { _, err := w.Write(cam); return err },
		recording.FramesFile: func(w *bufio.Writer) error {
			w.WriteString("index,t_capture_us,file\n")
			for k, t := range r.Session.Ticks {
				fmt.Fprintf(w, "%d,%d,\n", k, t.DisplayUs-r.latencyUs)
			}
			return nil
		},
		recording.TruthFile: func(w *bufio.Writer) error {
			w.WriteString("index,t_capture_us,x_m,y_m,yaw_rad,speed_mps,yaw_rate_rps\n")
			for k, t := range r.Session.Ticks {
				c := t.DisplayUs - r.latencyUs
				p, ok := r.Session.Truth(c)
				if !ok {
					return fmt.Errorf("no truth at %d us", c)
				}
				fmt.Fprintf(w, "%d,%d,%s,%s,%s,%s,0\n", k, c, ff(p.XM), ff(p.YM), ff(p.YawRad), ff(co.speedMps))
			}
			return nil
		},
		recording.TelemetryFile: func(w *bufio.Writer) error {
			w.WriteString("t_us,speed_mps,yaw_rate_rps\n")
			var prev Pose
			for k, t := range r.Session.Ticks {
				c := t.DisplayUs - r.latencyUs
				p, _ := r.Session.Truth(c)
				rate := 0.0
				if k > 0 {
					rate = (p.YawRad - prev.YawRad) / (float64(t.DisplayUs-r.Session.Ticks[k-1].DisplayUs) / 1e6)
				}
				prev = p
				fmt.Fprintf(w, "%d,%s,%s\n", c, ff(co.speedMps), ff(rate))
			}
			return nil
		},
		recording.ArrivalsFile: func(w *bufio.Writer) error {
			w.WriteString("index,t_arrival_us,t_deadline_us\n")
			for k, t := range r.Session.Ticks {
				arr := ""
				if t.Shown == ShownLive {
					arr = strconv.FormatInt(t.DisplayUs, 10)
				}
				fmt.Fprintf(w, "%d,%s,%d\n", k, arr, t.DisplayUs)
			}
			return nil
		},
		relay.ShownFile: func(w *bufio.Writer) error {
			w.WriteString("tick,state,age_ms,confidence,cutoff\n")
			for k, t := range r.Session.Ticks {
				fmt.Fprintf(w, "%d,%s,0,%.4f,%.4f\n", k, t.Shown, t.Confidence, t.Cutoff)
			}
			return nil
		},
		operator.ControlsFile: func(w *bufio.Writer) error {
			w.WriteString(operator.ControlsHeader + "\n")
			for _, c := range r.Session.Controls {
				fmt.Fprintf(w, "%d,%d,%s,%s,%s,,\n", c.TUs+1, c.TUs+1001, ff(c.SteerRad), ff(c.Throttle), ff(c.Brake)) // no speed_mps, no operator
			}
			return nil
		},
		PathFile: func(w *bufio.Writer) error {
			w.WriteString("x_m,y_m\n")
			for i := range co.path.XM {
				fmt.Fprintf(w, "%s,%s\n", ff(co.path.XM[i]), ff(co.path.YM[i]))
			}
			return nil
		},
	}
	for name, write := range files {
		f, err := os.Create(filepath.Join(dir, name))
		if err != nil {
			return err
		}
		w := bufio.NewWriter(f)
		err = write(w)
		if ferr := w.Flush(); err == nil {
			err = ferr
		}
		if cerr := f.Close(); err == nil {
			err = cerr
		}
		if err != nil {
			return fmt.Errorf("%s: %w", name, err)
		}
	}
	return nil
}

func ff(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }
