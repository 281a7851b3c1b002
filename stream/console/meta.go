package console

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
	"unicode/utf8"

	"stopgap/internal/display"
)

// Meta describes one output frame. It is sent as one JSON text message on the
// "meta" data channel, for example:
//
//	{"seq":812,"t_us":27066666,"state":"PREDICTED","age_ms":133,"max_age_ms":800,"period_ms":33.3,
//	 "why":"","confidence":0.81,"cutoff":0.6,"profile":"city","link":{"loss_pct":4.2,"jitter_ms":11,
//	 "delay_ms":84,"keyframe_requests":3,"frames_in":790,"no_packets_ms":0}}
type Meta struct {
	// Seq numbers output frames, +1 per display tick; receivers ignore a
	// message whose Seq is not newer than the last one seen.
	Seq uint64 `json:"seq"`
	// TimeUs is the display tick time on the vehicle clock, microseconds.
	TimeUs int64 `json:"t_us"`
	// State of the tick, written as display.State's String
	// (LIVE, PREDICTED, STALE, NO_PICTURE, NOT_SHOWN). NO_PICTURE: no real
	// frame yet, the frame on screen is a labelled empty one. NOT_SHOWN:
	// the relay decided the tick but put nothing new on screen, so the
	// viewer still sees the frame before it.
	State display.State `json:"state"`
	// AgeMs is how old the newest real picture content is, milliseconds
	// (display tick time minus capture time of the last real frame). It is
	// 0 for NO_PICTURE (there is no picture) and NOT_SHOWN (the tick put no
	// picture on screen); the page shows no age for them.
	AgeMs float64 `json:"age_ms"`
	// MaxAgeMs is the cap on the picture age: past it a missing frame is
	// STALE whatever the confidence, milliseconds.
	MaxAgeMs float64 `json:"max_age_ms"`
	// PeriodMs is the display clock's tick period when this tick was
	// decided, milliseconds (the relay's grid, which follows the sender's
	// capture cadence): the relay decides one tick, and sends one message,
	// about this often. The page takes from it how long a LIVE status stays
	// good without a newer one (StatusLateAfterMs). 0: not given (the page
	// then uses StatusLateMinMs).
	PeriodMs float64 `json:"period_ms"`
	// Why says why a STALE frame is STALE, one of the words of
	// predictor.StaleReason ("no-motion", "age-over-cap", "low-confidence",
	// or "no-picture" for a STALE tick with no real frame held); "" for
	// the other states.
	Why string `json:"why"`
	// Confidence of the prediction in [0, 1] (1 for LIVE).
	Confidence float64 `json:"confidence"`
	// Cutoff is the confidence cutoff the relay applied to this frame.
	Cutoff float64 `json:"cutoff"`
	// Profile is the name of the operator profile the cutoff came from.
	Profile string `json:"profile"`
	// Link holds ingest link statistics at this tick.
	Link LinkStats `json:"link"`
}

// LinkStats are statistics of the vehicle-to-relay link as the ingest sees
// them.
type LinkStats struct {
	LossPct          float64 `json:"loss_pct"`          // RTP packet loss over the recent window, percent
	JitterMs         float64 `json:"jitter_ms"`         // RFC 3550 interarrival jitter, milliseconds
	DelayMs          float64 `json:"delay_ms"`          // estimated one-way capture-to-arrival delay, milliseconds
	KeyframeRequests uint64  `json:"keyframe_requests"` // keyframe requests (PLI/FIR) sent to the vehicle so far
	FramesIn         uint64  `json:"frames_in"`         // complete frames received from the vehicle so far
	// NoPacketsMs is how long no video packet has arrived, milliseconds, once that is at least
	// NoPacketsAfterMs; 0 while packets flow. While it is set the page shows "no packets for N ms"
	// instead of loss and jitter, which a silent link leaves at their last, meaningless values.
	NoPacketsMs float64 `json:"no_packets_ms"`
}

// NoPacketsAfterMs is the silence after which LinkStats.NoPacketsMs is set: longer than the gap between
// two frames of a slow camera and than a keyframe request's round trip (our choice).
const NoPacketsAfterMs = 250

// Validate reports ErrBadMeta for an invalid State, a NaN/Inf number, a
// negative tick period, or a picture age other than 0 for a state that has
// no picture on screen (NO_PICTURE, NOT_SHOWN).
func (m *Meta) Validate() error {
	if !m.State.Valid() {
		return fmt.Errorf("%w: state %d is not one of display.States", ErrBadMeta, int(m.State))
	}
	if (m.State == display.StateNoPicture || m.State == display.StateNotShown) && m.AgeMs != 0 {
		return fmt.Errorf("%w: age_ms %v for %v; send 0, a tick without a picture on screen has no picture age", ErrBadMeta, m.AgeMs, m.State)
	}
	for _, f := range [...]struct {
		name string
		v    float64
	}{
		{"age_ms", m.AgeMs}, {"max_age_ms", m.MaxAgeMs}, {"period_ms", m.PeriodMs}, {"confidence", m.Confidence}, {"cutoff", m.Cutoff},
		{"link.loss_pct", m.Link.LossPct}, {"link.jitter_ms", m.Link.JitterMs}, {"link.delay_ms", m.Link.DelayMs},
		{"link.no_packets_ms", m.Link.NoPacketsMs},
	} {
		if math.IsNaN(f.v) || math.IsInf(f.v, 0) {
			return fmt.Errorf("%w: %s is %v; send a finite number", ErrBadMeta, f.name, f.v)
		}
	}
	if m.PeriodMs < 0 {
		return fmt.Errorf("%w: period_ms %v; send the display tick period (> 0), or 0 if it is not known", ErrBadMeta, m.PeriodMs)
	}
	return nil
}

// AppendJSON appends m as one JSON object to dst and returns the extended
// slice. It allocates nothing when dst has room; the result decodes with
// encoding/json into an equal Meta.
func (m *Meta) AppendJSON(dst []byte) ([]byte, error) {
	if err := m.Validate(); err != nil {
		return dst, err
	}
	dst = append(dst, `{"seq":`...)
	dst = strconv.AppendUint(dst, m.Seq, 10)
	dst = append(dst, `,"t_us":`...)
	dst = strconv.AppendInt(dst, m.TimeUs, 10)
	dst = append(dst, `,"state":"`...)
	dst = append(dst, m.State.String()...)
	dst = append(dst, `","age_ms":`...)
	dst = appendFloat(dst, m.AgeMs)
	dst = append(dst, `,"max_age_ms":`...)
	dst = appendFloat(dst, m.MaxAgeMs)
	dst = append(dst, `,"period_ms":`...)
	dst = appendFloat(dst, m.PeriodMs)
	dst = append(dst, `,"why":`...)
	dst = appendJSONString(dst, m.Why)
	dst = append(dst, `,"confidence":`...)
	dst = appendFloat(dst, m.Confidence)
	dst = append(dst, `,"cutoff":`...)
	dst = appendFloat(dst, m.Cutoff)
	dst = append(dst, `,"profile":`...)
	dst = appendJSONString(dst, m.Profile)
	dst = append(dst, `,"link":{"loss_pct":`...)
	dst = appendFloat(dst, m.Link.LossPct)
	dst = append(dst, `,"jitter_ms":`...)
	dst = appendFloat(dst, m.Link.JitterMs)
	dst = append(dst, `,"delay_ms":`...)
	dst = appendFloat(dst, m.Link.DelayMs)
	dst = append(dst, `,"keyframe_requests":`...)
	dst = strconv.AppendUint(dst, m.Link.KeyframeRequests, 10)
	dst = append(dst, `,"frames_in":`...)
	dst = strconv.AppendUint(dst, m.Link.FramesIn, 10)
	dst = append(dst, `,"no_packets_ms":`...)
	dst = appendFloat(dst, m.Link.NoPacketsMs)
	dst = append(dst, "}}"...)
	return dst, nil
}

// ParseMeta decodes one meta message strictly: a single JSON object with
// only Meta's fields, a state spelled as display.State's String, finite
// numbers (Validate). Every error wraps ErrBadMeta and names what is wrong;
// a bad state also wraps display.ErrInvalidState. It is the reader for
// programs that watch the "meta" channel (tests, tools); the page has its
// own, equally strict check of the state.
func ParseMeta(data []byte) (Meta, error) {
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.DisallowUnknownFields()
	var m Meta
	if err := dec.Decode(&m); err != nil {
		var syn *json.SyntaxError
		var typ *json.UnmarshalTypeError
		switch {
		case errors.Is(err, display.ErrInvalidState):
			return Meta{}, fmt.Errorf("%w: %w", ErrBadMeta, err)
		case errors.As(err, &syn):
			return Meta{}, fmt.Errorf("%w: not JSON at byte %d: %v", ErrBadMeta, syn.Offset, err)
		case errors.As(err, &typ):
			return Meta{}, fmt.Errorf("%w: field %q holds a JSON %s, want %v", ErrBadMeta, typ.Field, typ.Value, typ.Type)
		case errors.Is(err, io.EOF):
			return Meta{}, fmt.Errorf("%w: empty message; send one JSON object", ErrBadMeta)
		}
		return Meta{}, fmt.Errorf("%w: %v", ErrBadMeta, err)
	}
	if _, err := dec.Token(); !errors.Is(err, io.EOF) {
		return Meta{}, fmt.Errorf("%w: data after the JSON object at byte %d; send one object per message", ErrBadMeta, dec.InputOffset())
	}
	if err := m.Validate(); err != nil {
		return Meta{}, err
	}
	return m, nil
}

// appendFloat writes a finite float in the shortest form that round-trips;
// 'g' may use an exponent, which JSON allows.
func appendFloat(dst []byte, v float64) []byte {
	return strconv.AppendFloat(dst, v, 'g', -1, 64)
}

const hexDigits = "0123456789abcdef"

// appendJSONString appends s as a JSON string (RFC 8259 section 7): quotes,
// backslash and control characters escaped, invalid UTF-8 replaced by U+FFFD.
func appendJSONString(dst []byte, s string) []byte {
	dst = append(dst, '"')
	for i := 0; i < len(s); {
		c := s[i]
		if c < utf8.RuneSelf {
			switch {
			case c == '"' || c == '\\':
				dst = append(dst, '\\', c)
			case c < 0x20:
				dst = append(dst, '\\', 'u', '0', '0', hexDigits[c>>4], hexDigits[c&0xF])
			default:
				dst = append(dst, c)
			}
			i++
			continue
		}
		r, size := utf8.DecodeRuneInString(s[i:])
		if r == utf8.RuneError && size == 1 {
			dst = append(dst, `\ufffd`...)
		} else {
			dst = append(dst, s[i:i+size]...)
		}
		i += size
	}
	return append(dst, '"')
}
