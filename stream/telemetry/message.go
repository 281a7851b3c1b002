package telemetry

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
	"unicode/utf8"
)

// MaxMessageBytes is the largest encoded message accepted, in octets. One
// message with every field takes under 200 octets; the rest leaves room for
// fields a newer sender may add.
const MaxMessageBytes = 1024

// Sanity bounds of the decoder and encoder (our choice): about ten times the
// physical limits of a road vehicle, to reject garbage and gross unit
// mistakes while leaving physical plausibility to the filter.
const (
	// MaxTimeUs is the largest t_us, 2^53-1: the largest integer a sender
	// that stores numbers as IEEE 754 doubles (JavaScript) represents
	// exactly. About 285 years of microseconds, so Unix-epoch times fit.
	MaxTimeUs = 1<<53 - 1
	// MaxAbsSpeedMps bounds |speed_mps|.
	MaxAbsSpeedMps = 1000.0
	// MaxAbsYawRateRps bounds |yaw_rate_rps|.
	MaxAbsYawRateRps = 100.0
	// MaxAbsAccelMps2 bounds |accel_mps2|.
	MaxAbsAccelMps2 = 1000.0
	// MaxAbsSteerRad bounds |steer_rad|: one full turn.
	MaxAbsSteerRad = 2 * math.Pi
)

// JSON keys of the message.
const (
	KeyTimeUs     = "t_us"
	KeySpeedMps   = "speed_mps"
	KeyYawRateRps = "yaw_rate_rps"
	KeyAccelMps2  = "accel_mps2"
	KeySteerRad   = "steer_rad"
	KeySeq        = "seq"
)

// Message is one telemetry sample as sent by the vehicle. The zero value is
// a valid message at time 0, standing still.
type Message struct {
	// TimeUs is the measurement time on the vehicle clock, in
	// microseconds, 0..MaxTimeUs.
	TimeUs int64
	// SpeedMps is the longitudinal speed, negative when reversing.
	SpeedMps float64
	// YawRateRps is the yaw rate, positive turning left (ISO 8855).
	YawRateRps float64
	// AccelMps2 is the longitudinal acceleration; meaningful only if
	// HasAccel.
	AccelMps2 float64
	// HasAccel tells whether accel_mps2 is present.
	HasAccel bool
	// SteerRad is the front road-wheel angle, positive to the left;
	// meaningful only if HasSteer.
	SteerRad float64
	// HasSteer tells whether steer_rad is present.
	HasSteer bool
	// Seq is the sender's message counter; meaningful only if HasSeq.
	Seq uint32
	// HasSeq tells whether seq is present.
	HasSeq bool
}

// Decode parses one message strictly (see the package documentation for the
// rules). It returns a [*DecodeError] on rejection. b is not retained.
// The plain shape our senders write takes a fast path (decodePlain) with
// the same result.
func Decode(b []byte) (Message, error) {
	if len(b) > MaxMessageBytes {
		return decodeStrict(b) // the size error
	}
	if m, ok := decodePlain(b); ok {
		return m, nil
	}
	return decodeStrict(b)
}

// decodeStrict is Decode without its fast path: encoding/json's tokens.
func decodeStrict(b []byte) (Message, error) {
	var m Message
	fail := func(r Reason, key string, off int64, detail string) (Message, error) {
		return Message{}, &DecodeError{Reason: r, Key: key, Offset: off, Detail: detail}
	}
	if len(b) > MaxMessageBytes {
		return fail(ReasonTooLarge, "", MaxMessageBytes, fmt.Sprintf("%d octets, limit %d", len(b), MaxMessageBytes))
	}
	if !utf8.Valid(b) {
		return fail(ReasonNotUTF8, "", int64(invalidUTF8At(b)), "")
	}
	dec := json.NewDecoder(bytes.NewReader(b))
	dec.UseNumber()
	syntax := func(err error) (Message, error) {
		if errors.Is(err, io.EOF) {
			err = io.ErrUnexpectedEOF
		}
		return fail(ReasonSyntax, "", dec.InputOffset(), err.Error())
	}
	tok, err := dec.Token()
	if err != nil {
		return syntax(err)
	}
	if d, ok := tok.(json.Delim); !ok || d != '{' {
		return fail(ReasonNotObject, "", 0, fmt.Sprintf("top-level value is %s", describe(tok)))
	}
	var seen []string // keys so far; a message holds few
	var have [6]bool  // required and optional known keys
	for dec.More() {
		tok, err := dec.Token()
		if err != nil {
			return syntax(err)
		}
		key, ok := tok.(string)
		if !ok { // not reached: the JSON decoder only returns strings here
			return fail(ReasonSyntax, "", dec.InputOffset(), "object key is not a string")
		}
		keyOff := dec.InputOffset()
		for _, k := range seen {
			if k == key {
				return fail(ReasonDuplicateKey, key, keyOff, "")
			}
		}
		seen = append(seen, key)
		idx := keyIndex(key)
		if idx < 0 {
			var skip json.RawMessage // unknown key: any JSON value
			if err := dec.Decode(&skip); err != nil {
				return syntax(err)
			}
			continue
		}
		tok, err = dec.Token()
		if err != nil {
			return syntax(err)
		}
		num, ok := tok.(json.Number)
		if !ok {
			return fail(ReasonWrongType, key, keyOff, fmt.Sprintf("want a number, got %s", describe(tok)))
		}
		have[idx] = true
		if r, detail := m.set(idx, string(num)); r != ReasonInvalid {
			return fail(r, key, keyOff, detail)
		}
	}
	if _, err := dec.Token(); err != nil { // the closing '}'
		return syntax(err)
	}
	if _, err := dec.Token(); !errors.Is(err, io.EOF) {
		return fail(ReasonTrailingData, "", dec.InputOffset(), "")
	}
	for i, k := range keys[:3] {
		if !have[i] {
			return fail(ReasonMissingField, k, int64(len(b)), "")
		}
	}
	return m, nil
}

// decodePlain decodes the plain shape every sender of ours writes (Append):
// one compact object of known keys with number values, no white space, no
// escapes, no key twice, the required keys present, every value within its
// bounds. It reports false for anything else, and Decode then runs the
// strict path, which gives the same Message for every input decodePlain
// accepts (FuzzDecodePlain checks) and the error for the rest. It exists for
// the relay's CPU: encoding/json's token reader took about 7 us and 90
// allocations per message, 50 messages a second per vehicle.
func decodePlain(b []byte) (Message, bool) {
	var m Message
	var have [6]bool
	if len(b) < 2 || b[0] != '{' || b[len(b)-1] != '}' {
		return m, false
	}
	i := 1
	for {
		// "key":
		if i >= len(b) || b[i] != '"' {
			return m, false
		}
		j := i + 1
		for j < len(b) && b[j] != '"' && b[j] != '\\' && b[j] >= 0x20 && b[j] < 0x80 {
			j++
		}
		if j+1 >= len(b) || b[j] != '"' || b[j+1] != ':' {
			return m, false
		}
		idx := keyIndexBytes(b[i+1 : j])
		if idx < 0 || have[idx] {
			return m, false // unknown keys and duplicates: the strict path
		}
		have[idx] = true
		// number
		i = j + 2
		n := jsonNumberLen(b[i:])
		if n == 0 {
			return m, false
		}
		if r, _ := m.set(idx, string(b[i:i+n])); r != ReasonInvalid {
			return Message{}, false
		}
		i += n
		switch {
		case i == len(b)-1: // the closing '}'
			return m, have[0] && have[1] && have[2]
		case b[i] == ',':
			i++
		default:
			return m, false
		}
	}
}

// keyIndexBytes is keyIndex for a key's bytes.
func keyIndexBytes(k []byte) int {
	for i, kk := range keys {
		if string(k) == kk {
			return i
		}
	}
	return -1
}

// jsonNumberLen returns the length of the JSON number (RFC 8259 section 6)
// at the start of b, or 0 if b does not start with one.
func jsonNumberLen(b []byte) int {
	i := 0
	digits := func() int {
		n := 0
		for i < len(b) && b[i] >= '0' && b[i] <= '9' {
			i++
			n++
		}
		return n
	}
	if i < len(b) && b[i] == '-' {
		i++
	}
	switch {
	case i < len(b) && b[i] == '0':
		i++
	case digits() == 0:
		return 0
	}
	if i < len(b) && b[i] == '.' {
		i++
		if digits() == 0 {
			return 0
		}
	}
	if i < len(b) && (b[i] == 'e' || b[i] == 'E') {
		i++
		if i < len(b) && (b[i] == '+' || b[i] == '-') {
			i++
		}
		if digits() == 0 {
			return 0
		}
	}
	return i
}

// keys lists the known keys; the first three are required.
var keys = [6]string{KeyTimeUs, KeySpeedMps, KeyYawRateRps, KeyAccelMps2, KeySteerRad, KeySeq}

func keyIndex(k string) int {
	for i, kk := range keys {
		if k == kk {
			return i
		}
	}
	return -1
}

// set stores the number text s (valid JSON number syntax) in the field with
// key index idx; it returns ReasonInvalid on success.
func (m *Message) set(idx int, s string) (Reason, string) {
	switch idx {
	case 0: // t_us
		v, err := strconv.ParseInt(s, 10, 64)
		if err != nil {
			if errors.Is(err, strconv.ErrRange) {
				return ReasonOutOfRange, s + " does not fit in 64 bits"
			}
			return ReasonWrongType, s + " is not an integer"
		}
		if v < 0 || v > MaxTimeUs {
			return ReasonOutOfRange, fmt.Sprintf("%d outside 0..%d", v, int64(MaxTimeUs))
		}
		m.TimeUs = v
	case 5: // seq
		v, err := strconv.ParseUint(s, 10, 32)
		if err != nil {
			if errors.Is(err, strconv.ErrRange) || (len(s) > 0 && s[0] == '-' && isDigits(s[1:])) {
				return ReasonOutOfRange, s + " outside 0..4294967295"
			}
			return ReasonWrongType, s + " is not an integer"
		}
		m.Seq, m.HasSeq = uint32(v), true
	default:
		v, err := strconv.ParseFloat(s, 64)
		if err != nil { // only ErrRange for valid JSON numbers: overflow
			return ReasonOutOfRange, s + " is too large for a float64"
		}
		if math.Abs(v) > bounds[idx] {
			return ReasonOutOfRange, fmt.Sprintf("%s outside ±%g", s, bounds[idx])
		}
		switch idx {
		case 1:
			m.SpeedMps = v
		case 2:
			m.YawRateRps = v
		case 3:
			m.AccelMps2, m.HasAccel = v, true
		case 4:
			m.SteerRad, m.HasSteer = v, true
		}
	}
	return ReasonInvalid, ""
}

// bounds holds the sanity bound of each float key by key index.
var bounds = [6]float64{1: MaxAbsSpeedMps, 2: MaxAbsYawRateRps, 3: MaxAbsAccelMps2, 4: MaxAbsSteerRad}

func isDigits(s string) bool {
	for i := 0; i < len(s); i++ {
		if s[i] < '0' || s[i] > '9' {
			return false
		}
	}
	return s != ""
}

// describe names the JSON type of a token for error messages.
func describe(tok json.Token) string {
	switch v := tok.(type) {
	case json.Delim:
		if v == '{' {
			return "an object"
		}
		return "an array"
	case string:
		return "a string"
	case bool:
		return "a boolean"
	case nil:
		return "null"
	case json.Number:
		return "a number"
	}
	return fmt.Sprintf("%T", tok)
}

func invalidUTF8At(b []byte) int {
	for i := 0; i < len(b); {
		r, n := utf8.DecodeRune(b[i:])
		if r == utf8.RuneError && n <= 1 {
			return i
		}
		i += n
	}
	return len(b)
}

// Validate reports whether m can be encoded: TimeUs within 0..MaxTimeUs and
// every present float finite and within its sanity bound. It returns an
// [*EncodeError] otherwise.
func (m *Message) Validate() error {
	if m.TimeUs < 0 || m.TimeUs > MaxTimeUs {
		return &EncodeError{Key: KeyTimeUs, Err: ErrOutOfRange, Detail: fmt.Sprintf("%d outside 0..%d", m.TimeUs, int64(MaxTimeUs))}
	}
	check := func(idx int, v float64) error {
		if math.IsNaN(v) || math.Abs(v) > bounds[idx] {
			return &EncodeError{Key: keys[idx], Err: ErrOutOfRange, Detail: fmt.Sprintf("%g outside ±%g", v, bounds[idx])}
		}
		return nil
	}
	if err := check(1, m.SpeedMps); err != nil {
		return err
	}
	if err := check(2, m.YawRateRps); err != nil {
		return err
	}
	if m.HasAccel {
		if err := check(3, m.AccelMps2); err != nil {
			return err
		}
	}
	if m.HasSteer {
		if err := check(4, m.SteerRad); err != nil {
			return err
		}
	}
	return nil
}

// Append appends the encoding of m to dst and returns the extended slice:
// a compact JSON object with the keys in the documented order, optional
// fields only when present, floats in the shortest form that reads back
// exactly. On error (see [Message.Validate]) dst is returned unchanged.
// Append does not allocate when dst has room.
func (m *Message) Append(dst []byte) ([]byte, error) {
	if err := m.Validate(); err != nil {
		return dst, err
	}
	dst = append(dst, `{"`+KeyTimeUs+`":`...)
	dst = strconv.AppendInt(dst, m.TimeUs, 10)
	dst = appendFloat(dst, `,"`+KeySpeedMps+`":`, m.SpeedMps)
	dst = appendFloat(dst, `,"`+KeyYawRateRps+`":`, m.YawRateRps)
	if m.HasAccel {
		dst = appendFloat(dst, `,"`+KeyAccelMps2+`":`, m.AccelMps2)
	}
	if m.HasSteer {
		dst = appendFloat(dst, `,"`+KeySteerRad+`":`, m.SteerRad)
	}
	if m.HasSeq {
		dst = append(dst, `,"`+KeySeq+`":`...)
		dst = strconv.AppendUint(dst, uint64(m.Seq), 10)
	}
	return append(dst, '}'), nil
}

// appendFloat appends prefix and v. strconv's 'g' format with precision -1
// is the shortest decimal that parses back to v, and its forms ("1e+06",
// "-0", "0.001") are all valid JSON numbers; v is finite here.
func appendFloat(dst []byte, prefix string, v float64) []byte {
	dst = append(dst, prefix...)
	return strconv.AppendFloat(dst, v, 'g', -1, 64)
}

// Encode returns the encoding of m (see [Message.Append]).
func Encode(m Message) ([]byte, error) {
	return m.Append(make([]byte, 0, 160))
}
