package lossmodel

import (
	"errors"
	"fmt"
)

// Sentinel errors of package lossmodel. Functions wrap them with %w and
// add what was wrong and what to do; test with errors.Is.
var (
	// ErrConfig means a Config field is out of range; the wrapping error
	// is a *ParamError naming the field.
	ErrConfig = errors.New("lossmodel: invalid loss settings")
	// ErrCaptureTimes means the frame capture times given to Simulate are
	// not strictly increasing.
	ErrCaptureTimes = errors.New("lossmodel: capture times not strictly increasing")
)

// ParamError reports one out-of-range Config field. It wraps ErrConfig.
type ParamError struct {
	Field  string  // Go field name, e.g. "LossRate"
	Value  float64 // the offending value
	Reason string  // what the valid range is, in words
}

// Error implements error.
func (e *ParamError) Error() string {
	return fmt.Sprintf("lossmodel: loss setting %s = %v: %s", e.Field, e.Value, e.Reason)
}

// Unwrap returns ErrConfig.
func (e *ParamError) Unwrap() error { return ErrConfig }
