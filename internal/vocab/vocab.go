// Package vocab holds the words every surface of stopgap shares: the
// safety caution, the name and unit of the frame age, the short line the
// predicted frame carries about moving objects, and the words of a tick
// with no picture (NoPicture). The console, the
// replay and tune reports, the terminal and the README take them from
// here (the README's copy is checked by a test), so they cannot drift
// apart. It imports nothing and needs no cgo.
//
// The names of the frame states (LIVE, PREDICTED, STALE, NO_PICTURE,
// NOT_SHOWN) are not here:
// their one source is the frame-state type's String method.
package vocab

import (
	"math"
	"strconv"
)

// CautionTitle heads the safety caution on every surface.
const CautionTitle = "SAFETY CAUTION"

// Caution is the safety caution, one paragraph of plain text shown under
// CautionTitle. It describes what stopgap shows and defers every driving
// decision to local regulations and the operator's licensed procedures; it
// gives no driving orders of its own.
const Caution = "A PREDICTED picture is not a camera image: it is the last real " +
	"picture, moved to where the camera is estimated to be now. It moves the static scene only. " +
	"Anything that moved since the last real picture, such as a pedestrian stepping out or a car " +
	"braking, is not in it, or is shown where it was. A STALE picture is an old one. Both are " +
	"labelled in their pixels, and stopgap never presents them as live. stopgap gives no driving " +
	"instructions: local regulations and the operator's licensed procedures decide how to drive, " +
	"and they always take precedence."

// AgeTerm names the frame age on every surface: the time from the capture
// of the newest real picture content on screen to the displayed tick. It is
// always given in milliseconds (AgeUnit) and never with a sign, so that it
// cannot be read as a prediction horizon.
const AgeTerm = "picture age"

// AgeUnit is the unit the picture age is shown in.
const AgeUnit = "ms"

// MovingNotShown is the line a predicted frame carries in its pixels:
// the warp moves the static scene only.
const MovingNotShown = "moving objects not shown"

// NoPicture says what a NO_PICTURE tick shows: no real frame has arrived in
// the session yet, so there is no picture and no picture age. The frame
// carries it in its pixels (upper case) and the console in its banner.
const NoPicture = "no picture yet"

// AppendAge appends "picture age <ms> ms" to dst, the age rounded to whole
// milliseconds, and returns the extended slice. It allocates nothing when
// dst has room (26 bytes suffice). A NaN or infinite age is written as
// "picture age unknown".
func AppendAge(dst []byte, ageMs float64) []byte {
	dst = append(dst, AgeTerm...)
	if math.IsNaN(ageMs) || math.IsInf(ageMs, 0) {
		return append(dst, " unknown"...)
	}
	dst = append(dst, ' ')
	dst = strconv.AppendInt(dst, int64(math.Round(ageMs)), 10)
	return append(append(dst, ' '), AgeUnit...)
}

// Age returns AppendAge(nil, ageMs) as a string.
func Age(ageMs float64) string { return string(AppendAge(nil, ageMs)) }
