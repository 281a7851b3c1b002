package operator

import (
	"math"

	"stopgap/stream/console"
)

func nan() float64 { return math.NaN() }

func ptr[T any](v T) *T { return &v }

func consoleReq(profile *string, cutoff *float64) console.CutoffRequest {
	return console.CutoffRequest{Profile: profile, Cutoff: cutoff}
}
