//go:build ignore

// Command gen writes a small generated Y4M clip (320x180, 30 frames, 30 fps:
// a sky, a road with a moving dashed centre line and a frame-number bar) to
// stdout. It is encoded to testdata/drive320.ivf with Debian's vpxenc
// (package vpx-tools, libvpx 1.12):
//
//	go run testdata/gen/main.go > /tmp/drive320.y4m
//	vpxenc --codec=vp8 --ivf --good --cpu-used=4 \
//	    --target-bitrate=400 --kf-min-dist=10 --kf-max-dist=10 --lag-in-frames=0 \
//	    -o testdata/drive320.ivf /tmp/drive320.y4m
package main

import (
	"bufio"
	"fmt"
	"os"
)

const w, h, n = 320, 180, 30

func main() {
	out := bufio.NewWriter(os.Stdout)
	defer out.Flush()
	fmt.Fprintf(out, "YUV4MPEG2 W%d H%d F30:1 Ip A1:1 C420jpeg\n", w, h)
	y := make([]byte, w*h)
	u := make([]byte, w*h/4)
	v := make([]byte, w*h/4)
	horizon := h * 2 / 5
	for f := 0; f < n; f++ {
		for r := 0; r < h; r++ {
			for c := 0; c < w; c++ {
				var val byte
				if r < horizon {
					val = byte(200 - r) // sky, brighter at the top
				} else {
					// road between two lines converging at the centre of the horizon
					t := float64(r-horizon) / float64(h-horizon)
					half := 20 + t*150
					dx := float64(c - w/2)
					switch {
					case dx > -half && dx < half:
						val = 90
						// dashed centre line moving toward the camera
						if dx > -2-3*t && dx < 2+3*t && ((r+4*f)/12)%2 == 0 {
							val = 235
						}
					default:
						val = 60 // verge
					}
				}
				y[r*w+c] = val
			}
		}
		// frame-number bar: f+1 white blocks at the top left
		for b := 0; b <= f; b++ {
			for r := 4; r < 10; r++ {
				for c := 4 + b*8; c < 10+b*8 && c < w; c++ {
					y[r*w+c] = 255
				}
			}
		}
		for i := range u {
			r := (i / (w / 2)) * 2
			if r < horizon {
				u[i], v[i] = 150, 110 // bluish sky
			} else {
				u[i], v[i] = 128, 128
			}
		}
		out.WriteString("FRAME\n")
		out.Write(y)
		out.Write(u)
		out.Write(v)
	}
}
