package main

import (
	"fmt"
	"io"
	"strings"
	"time"
)

// progressBar draws a one-line progress bar on a terminal-like writer,
// at most every 200 ms, and a final line when done == total.
func progressBar(w io.Writer, label string) func(done, total int) {
	start := time.Now()
	var last time.Time
	return func(done, total int) {
		now := time.Now()
		if done < total && now.Sub(last) < 200*time.Millisecond {
			return
		}
		last = now
		frac := 0.0
		if total > 0 {
			frac = float64(done) / float64(total)
		}
		const width = 30
		n := int(frac * width)
		eta := ""
		if done > 0 && done < total {
			left := time.Duration(float64(now.Sub(start)) * (1/frac - 1))
			eta = fmt.Sprintf(" eta %s", left.Round(time.Second))
		}
		fmt.Fprintf(w, "\r%-9s [%s%s] %3.0f%% %d/%d%s   ", label, strings.Repeat("#", n), strings.Repeat(".", width-n), 100*frac, done, total, eta)
		if done >= total {
			fmt.Fprintf(w, " %s\n", now.Sub(start).Round(100*time.Millisecond))
		}
	}
}
