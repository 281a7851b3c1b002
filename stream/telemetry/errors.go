package telemetry

import (
	"errors"
	"fmt"
)

// Errors returned by this package, usually wrapped in a [*DecodeError] or
// [*EncodeError]; compare with [errors.Is].
var (
	// ErrTooLarge: the message is longer than MaxMessageBytes. The sender
	// must send one message per data channel message or datagram.
	ErrTooLarge = errors.New("telemetry: message too large")
	// ErrNotUTF8: the message is not valid UTF-8.
	ErrNotUTF8 = errors.New("telemetry: message is not valid UTF-8")
	// ErrSyntax: the message is not well-formed JSON.
	ErrSyntax = errors.New("telemetry: malformed JSON")
	// ErrNotObject: the top-level JSON value is not an object.
	ErrNotObject = errors.New("telemetry: message is not a JSON object")
	// ErrDuplicateKey: a key appears twice in the object.
	ErrDuplicateKey = errors.New("telemetry: duplicate key")
	// ErrWrongType: a known key has a value of the wrong JSON type, or a
	// fraction or exponent where an integer is required.
	ErrWrongType = errors.New("telemetry: wrong value type")
	// ErrMissingField: a required key (t_us, speed_mps, yaw_rate_rps) is
	// absent.
	ErrMissingField = errors.New("telemetry: required key missing")
	// ErrOutOfRange: a number is outside its sanity bounds, not finite, or
	// too large to represent.
	ErrOutOfRange = errors.New("telemetry: value out of range")
	// ErrTrailingData: something other than white space follows the
	// object.
	ErrTrailingData = errors.New("telemetry: data after the JSON object")
	// ErrNoHandler: Receiver.Serve was called without a Handle function.
	ErrNoHandler = errors.New("telemetry: Receiver has no Handle function")
)

// Reason classifies a decoding failure for counting.
type Reason uint8

// Decoding failure reasons. The zero value is invalid.
const (
	ReasonInvalid      Reason = iota // zero value, never reported
	ReasonTooLarge                   // ErrTooLarge
	ReasonNotUTF8                    // ErrNotUTF8
	ReasonSyntax                     // ErrSyntax
	ReasonNotObject                  // ErrNotObject
	ReasonDuplicateKey               // ErrDuplicateKey
	ReasonWrongType                  // ErrWrongType
	ReasonMissingField               // ErrMissingField
	ReasonOutOfRange                 // ErrOutOfRange
	ReasonTrailingData               // ErrTrailingData

	reasonCount
)

var reasonNames = [...]string{
	ReasonInvalid:      "invalid",
	ReasonTooLarge:     "too-large",
	ReasonNotUTF8:      "not-utf8",
	ReasonSyntax:       "syntax",
	ReasonNotObject:    "not-object",
	ReasonDuplicateKey: "duplicate-key",
	ReasonWrongType:    "wrong-type",
	ReasonMissingField: "missing-field",
	ReasonOutOfRange:   "out-of-range",
	ReasonTrailingData: "trailing-data",
}

var reasonErrs = [...]error{
	ReasonTooLarge:     ErrTooLarge,
	ReasonNotUTF8:      ErrNotUTF8,
	ReasonSyntax:       ErrSyntax,
	ReasonNotObject:    ErrNotObject,
	ReasonDuplicateKey: ErrDuplicateKey,
	ReasonWrongType:    ErrWrongType,
	ReasonMissingField: ErrMissingField,
	ReasonOutOfRange:   ErrOutOfRange,
	ReasonTrailingData: ErrTrailingData,
}

// String returns a short lower-case name such as "wrong-type".
func (r Reason) String() string {
	if int(r) < len(reasonNames) {
		return reasonNames[r]
	}
	return fmt.Sprintf("Reason(%d)", uint8(r))
}

// DecodeError describes why a message was rejected.
type DecodeError struct {
	// Reason classifies the failure.
	Reason Reason
	// Key is the JSON key concerned, if any.
	Key string
	// Offset is the octet offset in the message where the problem was
	// found (approximate for syntax errors).
	Offset int64
	// Detail says more, e.g. the offending value; may be empty.
	Detail string
}

// Error implements error.
func (e *DecodeError) Error() string {
	s := e.Unwrap().Error()
	if e.Key != "" {
		s += fmt.Sprintf(" (key %q)", e.Key)
	}
	if e.Detail != "" {
		s += ": " + e.Detail
	}
	return fmt.Sprintf("%s at offset %d", s, e.Offset)
}

// Unwrap returns the Err* value matching Reason.
func (e *DecodeError) Unwrap() error {
	if int(e.Reason) < len(reasonErrs) && reasonErrs[e.Reason] != nil {
		return reasonErrs[e.Reason]
	}
	return ErrSyntax
}

// EncodeError describes why a Message cannot be encoded.
type EncodeError struct {
	// Key is the JSON key of the offending field.
	Key string
	// Err is the cause, ErrOutOfRange.
	Err error
	// Detail names the value and the bound.
	Detail string
}

// Error implements error.
func (e *EncodeError) Error() string {
	return fmt.Sprintf("%v (key %q): %s", e.Err, e.Key, e.Detail)
}

// Unwrap returns the cause.
func (e *EncodeError) Unwrap() error { return e.Err }
